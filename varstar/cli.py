"""The command line: parses, calls the API, prints.  No computation of its own.

Expected mistakes (:class:`varstar.errors.VarstarError`) become one
``error: ...`` line on stderr and a non-zero exit code; with ``--json`` stdout
carries exactly one JSON object and nothing else: the result, or
``{"error": message, "exit_code": N}`` on an error (also for a mistake on the command line itself, and for a bug, whose
traceback still goes to stderr).  The exit codes are :data:`EXIT_CODES`,
documented in the README's "Exit codes".
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from . import text as fmt
from .progress import progress_bar

#: One exit code per kind of outcome, the same in every command (README, "Exit codes").  The codes of
#: the error classes are their ``exit_code`` (varstar/errors.py); this table is what the README documents.
EXIT_CODES = {
    "success": 0,
    "bug": 1,  # an unexpected exception: Python's own code, traceback kept
    "usage": 2,  # argparse: unknown command or option, missing or malformed argument
    "InputError": 2,
    "OutputError": 2,
    "ArchiveError": 3,
    "ReductionError": 4,
    "interrupted": 130,
}


def _parse_columns(items: Sequence[str] | None) -> dict[str, str] | None:
    from .errors import InputError

    if not items:
        return None
    out = {}
    for item in items:
        ours, sep, theirs = item.partition("=")
        if not sep or not ours.strip() or not theirs.strip():
            raise InputError(f"--column {item!r}: expected NAME=FILE_COLUMN, e.g. --column jd=JD_UTC")
        out[ours.strip()] = theirs.strip()
    return out


#: Options that name a result file, with their spelling for messages; ``--save`` is read and updated, so regular only.
_OUTPUT_OPTIONS = (("output", "-o"), ("html", "--html"), ("phased", "--phased"), ("diagram", "--diagram"), ("csv", "--csv"), ("save", "--save"))


def _outputs(args: argparse.Namespace) -> list[tuple[str, Path]]:
    """The (option, path) pairs of the result files this command was asked to write."""
    return [(flag, getattr(args, name)) for name, flag in _OUTPUT_OPTIONS if getattr(args, name, None) is not None]


def _check_outputs(args: argparse.Namespace) -> None:
    """Refuse, before any work, output names that cannot be written or that clash.

    Each goes through :func:`varstar.export.check_output_path` (a folder, a
    missing folder, a socket...); at most one output may be stdout, and none
    with ``--json`` (stdout then carries the JSON); two outputs may not name
    the same regular file.
    """
    import os

    from .errors import OutputError
    from .export import check_output_path, is_stdout

    outs = _outputs(args)
    seen: dict[str, str] = {}
    to_stdout = []
    for flag, path in outs:
        check_output_path(path, regular=flag == "--save")
        if is_stdout(path):
            to_stdout.append(flag)
            continue
        if os.path.exists(path) and not os.path.isfile(path):
            continue  # FIFOs and devices may take several outputs
        key = os.path.realpath(path)
        if key in seen:
            raise OutputError(f"{path}: named by both {seen[key]} and {flag}; give each output its own file")
        seen[key] = flag
    if to_stdout and getattr(args, "json", False):
        raise OutputError(f"{' and '.join(to_stdout)}: standard output carries the JSON result with --json; write to a file")
    if len(to_stdout) > 1:
        raise OutputError(f"{' and '.join(to_stdout)} both name standard output; only one result can go there")


def _emit(args: argparse.Namespace, payload: dict[str, Any], text: str) -> None:
    """Print the result: JSON or text on stdout, or the text on stderr when a result file went to stdout."""
    from .export import is_stdout, to_json

    if getattr(args, "json", False):
        sys.stdout.write(to_json(payload) + "\n")
    elif any(is_stdout(path) for _flag, path in _outputs(args)):
        sys.stderr.write(text.rstrip("\n") + "\n")
    else:
        sys.stdout.write(text.rstrip("\n") + "\n")


# -- commands --------------------------------------------------------------------
def cmd_init(args: argparse.Namespace) -> int:
    from .workflows.archive import create_archive
    from .target import read_target

    target = read_target(args.target)
    arch = create_archive(args.archive, target)
    payload = {"archive": str(arch.path), "target": target.to_dict()}
    _emit(args, payload, f"created {arch.path} for {target.name} ({fmt.plural(len(target.stars), 'star')})")
    return 0


def cmd_ingest(args: argparse.Namespace) -> int:
    from .workflows.night import ingest

    with progress_bar("ingest", as_json=args.json) as progress:
        res = ingest(args.archive, args.files, columns=_parse_columns(args.column), timeout_s=args.wait,
                     replace=args.replace, accept_unusual=args.accept_unusual, time_format=args.time_format,
                     time_system=args.time_system, time_point=args.time_point, workers=args.workers, progress=progress)
    _emit(args, res, fmt.format_ingest(res.to_dict()))
    return 0


def cmd_measure(args: argparse.Namespace) -> int:
    import pandas as pd

    from .export import write_atomic
    from .photometry import measurement_csv
    from .target import read_target
    from .workflows.frames import measure

    target = read_target(args.target)  # checks the optional tables too; measure() checks [photometry]
    with progress_bar("frames", as_json=args.json, unit="frame") as progress:
        res = measure(target, args.frames, workers=args.workers, progress=progress)
    write_atomic(args.output, measurement_csv(res.table))
    t = res.table
    payload = {"output": str(args.output), "n_frames": int(res.n_frames), "n_rows": int(len(t)),
               "n_flagged": int((t["flag"] != 0).sum()), "bands": sorted(pd.unique(t["band"]).tolist()),
               "refused": list(res.refused)}
    _emit(args, payload, fmt.format_measure(payload))
    return 0


def cmd_summary(args: argparse.Namespace) -> int:
    from .workflows.archive import open_archive

    s = open_archive(args.archive).summary().to_dict()
    _emit(args, s, fmt.format_summary(s))
    return 0


def cmd_report(args: argparse.Namespace) -> int:
    from .errors import InputError
    from .workflows.archive import open_archive

    if args.html is None:
        if args.night is None:
            raise InputError("give a night (YYYY-MM-DD), or --html FILE for a page of the whole archive")
        if args.open:
            raise InputError("--open opens the page --html writes; give --html FILE")
        rep = open_archive(args.archive).night_report(args.night)
        _emit(args, rep, fmt.format_night_report(rep))
        return 0
    from .report import archive_page, night_page, write_page

    arch = open_archive(args.archive)
    page = night_page(arch.path, args.night) if args.night else archive_page(arch.path)
    write_page(page, args.html)
    opened = _open_in_browser(args.html) if args.open else None
    what = f"night {args.night}" if args.night else "the whole archive"
    payload = {"html": str(args.html), "night": args.night, "bytes": len(page.encode("utf-8")), "opened": opened}
    note = {True: "; opened in the browser", False: "; no browser could be started here", None: ""}[opened]
    _emit(args, payload, f"wrote {args.html} (a page of {what}, {payload['bytes'] / 1e6:.1f} MB){note}")
    return 0


def _open_in_browser(path: Path) -> bool:
    """Open a written page in the system browser when there is one; whether one was started."""
    import webbrowser

    try:
        return bool(webbrowser.open(Path(path).resolve().as_uri()))
    except webbrowser.Error:
        return False


def cmd_plot(args: argparse.Namespace) -> int:
    import pandas as pd

    from .workflows.archive import open_archive
    from .plots import lightcurve_figure, nights_figure, save

    arch = open_archive(args.archive)
    lc = arch.lightcurve(band=args.band, star=args.star, include_flagged=args.include_flagged)
    if args.night:
        arch.require_night(args.night)
        lc = lc[lc["night"] == args.night]
    title = f"{arch.target.name} — {lc['star'].iloc[0] if len(lc) else ''}"
    if args.by_night:
        fig = nights_figure(lc, title=title, show_flagged=args.include_flagged, max_nights=args.by_night)
    else:
        checks = None
        if args.night and args.star is None:  # one night of the target: its check stars in a panel of their own
            parts = [arch.lightcurve(band=args.band, star=s.id, include_flagged=args.include_flagged)
                     for s in arch.target.stars_with_role("check")]
            parts = [p[p["night"] == args.night] for p in parts]
            checks = pd.concat(parts, ignore_index=True) if any(len(p) for p in parts) else None
        fig = lightcurve_figure(lc, title=title, show_flagged=args.include_flagged, checks=checks)
    save(fig, args.output)
    _emit(args, {"plot": str(args.output), "n_points": int(len(lc))}, f"wrote {args.output} ({fmt.plural(len(lc), 'point')})")
    return 0


def cmd_export(args: argparse.Namespace) -> int:
    from .workflows.archive import open_archive
    from .export import lightcurve_table, write_csv

    arch = open_archive(args.archive)
    lc = arch.lightcurve(band=args.band, star=args.star, include_flagged=args.include_flagged)
    write_csv(lightcurve_table(lc), args.output)
    _emit(args, {"csv": str(args.output), "n_rows": int(len(lc))}, f"wrote {args.output} ({fmt.plural(len(lc), 'observation')})")
    return 0


def cmd_coefficients(args: argparse.Namespace) -> int:
    from .plots import coefficient_figure, save
    from .setups import save_setup
    from .standards import fit_standard_field, k2_assumption_notes

    if args.setup and not args.save:
        from .errors import InputError

        raise InputError("--setup names the setup to write with --save FILE; give --save too")
    given = args.k2_bv is not None
    k2_bv = args.k2_bv if given else 0.0
    columns = _parse_columns(args.column)
    fit = fit_standard_field(args.files, args.standards, columns=columns, k2_bv=k2_bv)
    coeffs = fit.coefficients(f"{Path(args.standards).name} fit", k2_bv=k2_bv, k2_bv_err=args.k2_bv_err)
    payload = fit.to_dict()
    payload["k2_bv"] = k2_bv
    payload["k2_bv_err"] = args.k2_bv_err
    payload["k2_bv_given"] = given
    if not given:
        payload["warnings"] = [*payload.get("warnings", []),
                               *k2_assumption_notes(args.files, args.standards, fit, columns=columns)]
    text = fmt.format_coefficients(payload, k2_bv)
    if args.output:
        save(coefficient_figure(fit), args.output)
        payload["plot"] = str(args.output)
        text += f"\nwrote {args.output}"
    if args.save:
        name = args.setup or "default"
        save_setup(args.save, name, coeffs, {"fitted from": Path(args.standards).name, "stars": fit.n_stars})
        payload["saved"] = {"file": str(args.save), "setup": name}
        text += f"\nsaved as setup '{name}' in {args.save}"
    _emit(args, payload, text)
    return 0


def cmd_transform(args: argparse.Namespace) -> int:
    from .workflows.archive import open_archive
    from .errors import InputError
    from .workflows.standard import transform_archive
    from .setups import read_setup

    if args.coefficients:
        coeffs, gap = read_setup(args.coefficients, args.setup)
    else:
        if args.setup:
            raise InputError("--setup needs --coefficients FILE")
        active = open_archive(args.archive).active_transformation()
        if active is None:
            raise InputError(f"{args.archive}: no coefficients yet: give --coefficients FILE (a setups file or a TOML with [transformation])")
        _, coeffs, gap = active
    if args.max_gap_minutes is not None:
        if not 0 < args.max_gap_minutes <= 240:
            raise InputError(f"--max-gap-minutes {args.max_gap_minutes:g}: give minutes in (0, 240]")
        gap = args.max_gap_minutes / 1440.0
    with progress_bar("nights", as_json=args.json, unit="night") as progress:
        res = transform_archive(args.archive, coeffs, gap, timeout_s=args.wait, progress=progress)
    _emit(args, res, fmt.format_transform(res.to_dict()))
    return 0


def cmd_colour(args: argparse.Namespace) -> int:
    from .workflows.archive import open_archive
    from .colour import colour_summary, phases
    from .workflows.standard import field_diagram
    from .plots import colour_figure, colour_magnitude_figure, save

    arch = open_archive(args.archive)
    target = arch.target
    lc = arch.lightcurve(star=args.star)
    if args.night:
        arch.require_night(args.night)
        lc = lc[lc["night"] == args.night]
    summary = colour_summary(lc, target)
    text = fmt.format_colour(summary)
    if args.output:
        ph = phases(lc["bjd_tdb"].to_numpy(), target)
        eph = summary.get("ephemeris")
        save(colour_figure(lc, title=f"{target.name}: {summary['star']}", phase=ph,
                           period=eph["period"] if eph else None), args.output)
        summary["plot"] = str(args.output)
        text += f"\nwrote {args.output}"
    if args.diagram:
        night = args.night or str(arch.nights()["night"].iloc[-1])
        field, track = field_diagram(arch, night)
        save(colour_magnitude_figure(field, track, title=f"{target.name}, night {night}"), args.diagram)
        summary["diagram"] = {"file": str(args.diagram), "night": night, "stars": field.to_dict(orient="records")}
        text += f"\nwrote {args.diagram} (night {night})"
    _emit(args, summary, text)
    return 0


def cmd_period(args: argparse.Namespace) -> int:
    from .plots import period_figures, save
    from .workflows.archive import open_archive

    arch = open_archive(args.archive)
    if args.history:
        hist = arch.periods()
        rows = hist.drop(columns=["result"]).to_dict(orient="records")
        text = "\n".join(f"{r['analysis']:3d} {r['computed_utc']} {r['bands']:6s} P = {r['period']:.7f} ± {r['period_err']:.7f} d "
                          f"({fmt.plural(r['n_points'], 'point')}, {r['method']})" for r in rows) or "no period analyses stored yet"
        _emit(args, {"archive": str(arch.path), "periods": rows}, text)
        return 0
    out = arch.period(
        band=args.band, star=args.star, store=not args.no_store, include_flagged=args.include_flagged,
        min_period=args.min_period, max_period=args.max_period, oversampling=args.oversampling,
        nterms=args.terms, harmonics=args.harmonics, bootstrap=args.bootstrap, seed=args.seed,
        single=args.single, snr_limit=args.snr, max_frequencies=args.max_frequencies, timeout_s=args.wait,
    )
    payload = out.to_dict()
    text = fmt.format_period(payload)
    if args.output or args.phased:
        periodogram, phased = period_figures(out, f"{arch.target.name}: {payload['star']}")
        for path, fig, key in ((args.output, periodogram, "periodogram_plot"), (args.phased, phased, "phased_plot")):
            if path:
                save(fig, path)
                payload[key] = str(path)
                text += f"\nwrote {path}"
    _emit(args, payload, text)
    return 0


def cmd_timings(args: argparse.Namespace) -> int:
    from .workflows.extrema import timings_of_archive
    from .workflows.archive import open_archive
    from .export import timings_table, write_csv
    from .plots import save, timings_figure

    arch = open_archive(args.archive)
    with progress_bar("extrema", as_json=args.json, unit="night") as progress:
        d = timings_of_archive(arch, band=args.band, kind=args.kind, night=args.night, note=args.note or "",
                               store=not args.no_store, update=args.update, include_disagreeing=args.include_disagreeing,
                               seed=args.seed, timeout_s=args.wait, progress=progress).to_dict()
    text = fmt.format_timings(d)
    if args.output and d["timings"]:
        save(timings_figure(d, f"{arch.target.name}: O − C"), args.output)
        d["plot"] = str(args.output)
        text += f"\nwrote {args.output}"
    elif args.output:
        text += f"\nno timings, so no O − C diagram: {args.output} not written"
    if args.csv:
        write_csv(timings_table(d["timings"]), args.csv)
        d["csv"] = str(args.csv)
        text += f"\nwrote {args.csv}"
    _emit(args, d, text)
    return 0


def cmd_predict(args: argparse.Namespace) -> int:
    from .workflows.extrema import predict_of_archive
    from .workflows.archive import open_archive

    arch = open_archive(args.archive)
    d = predict_of_archive(arch, args.start, args.end, site_visible=args.site_visible,
                           min_altitude_deg=args.min_altitude, max_sun_altitude_deg=args.sun_altitude)
    _emit(args, d, fmt.format_predict(d.to_dict()))
    return 0


def cmd_verify(args: argparse.Namespace) -> int:
    from .archive import verify
    from .errors import ArchiveError

    rep = verify(args.archive)
    d = rep.to_dict()
    text = fmt.format_verify(d)
    if not rep.ok:
        if args.json:
            failed = ArchiveError(f"{args.archive}: verification failed "
                                  f"({fmt.plural(len(rep.problems), 'problem')}, listed in 'problems')")
            failed.result = d  # its fields go into the one JSON error object
            raise failed
        sys.stdout.write(text + "\n")
        raise ArchiveError(f"{args.archive}: verification failed ({fmt.plural(len(rep.problems), 'problem')}, listed above)")
    _emit(args, d, text)
    return 0


def cmd_upgrade(args: argparse.Namespace) -> int:
    from .archive import upgrade

    res = upgrade(args.archive, timeout_s=args.wait).to_dict()
    _emit(args, res, fmt.format_upgrade(res))
    return 0


def _removal_reason(args: argparse.Namespace) -> str:
    """The reason recorded with a removal: ``--reason``, or asked for when a person is at a terminal.

    Without ``--reason`` and without a terminal (a script) the removal is recorded without a reason, as
    before (kept for scripts and tests that do so)."""
    from .errors import InputError

    how = 'give --reason "..." (the reason is recorded in the archive with the removal)'
    if args.reason is not None:
        if not args.reason.strip():
            raise InputError(f"--reason is empty: say why night {args.night} is removed; {how}")
        return args.reason.strip()
    stdin = sys.stdin
    if stdin is None or not stdin.isatty():
        return ""
    sys.stderr.write(f"why remove night {args.night}? (recorded in the archive; or {how}) ")
    sys.stderr.flush()
    answer = stdin.readline().strip()
    if not answer:
        raise InputError(f"no reason given, nothing removed: {how}")
    return answer


def cmd_remove_night(args: argparse.Namespace) -> int:
    from .workflows.night import remove_night

    res = remove_night(args.archive, args.night, reason=_removal_reason(args), timeout_s=args.wait)
    _emit(args, res, fmt.format_removal(res.to_dict()))
    return 0


def cmd_edit_target(args: argparse.Namespace) -> int:
    from .errors import ArchiveError, InputError
    from .export import to_json

    if args.show is not None or args.history:
        if args.description or args.set or args.unset:
            raise InputError("--show and --history only read; give the new description or --set/--unset without them")
        from .workflows.archive import open_archive

        history = open_archive(args.archive).descriptions()
        if args.history:
            payload = {"archive": str(args.archive), "descriptions": history.to_dict(orient="records")}
            _emit(args, payload, fmt.format_descriptions(history))
            return 0
        n = len(history) - 1 if args.show == -1 else args.show
        if not 0 <= n < len(history):
            raise ArchiveError(f"{args.archive}: no description {n} (versions 0 to {len(history) - 1}; see --history)")
        toml = str(history["toml"].iloc[n])
        if args.json:
            sys.stdout.write(to_json({"archive": str(args.archive), "description": n, "toml": toml}) + "\n")
        else:
            sys.stdout.write(toml if toml.endswith("\n") else toml + "\n")
        return 0
    if args.description is None and not args.set and not args.unset:
        raise InputError("give a new description (a TOML file), or keys to change with --set KEY=VALUE / --unset KEY "
                         "(see 'varstar edit-target --help')")
    from .inputs import read_toml_text
    from .workflows.describe import edit_target

    text = read_toml_text(args.description) if args.description is not None else None
    with progress_bar("nights", as_json=args.json, unit="night") as progress:
        res = edit_target(args.archive, text=text, source=str(args.description) if args.description else None,
                          sets=args.set or (), unsets=args.unset or (), note=args.note or "", dry_run=args.dry_run,
                          accept_unusual=args.accept_unusual, timeout_s=args.wait, progress=progress)
    _emit(args, res, fmt.format_description_change(res.to_dict()))
    return 0


def cmd_demo(args: argparse.Namespace) -> int:
    from .demo import run_demo

    res = run_demo(args.out, echo=None if args.json else print)
    _emit(args, res, f"\nDemo results are in {res['folder']}: {', '.join(Path(p).name for p in res['files'])}")
    return 0


class _Parser(argparse.ArgumentParser):
    """argparse, remembering the last usage error (on the top parser, for the JSON error object)."""

    def error(self, message: str):  # type: ignore[override]
        top = getattr(self, "top", self)
        top.last_error = f"{self.prog}: {message}"
        super().error(message)


def build_parser() -> argparse.ArgumentParser:
    from . import __version__

    p = _Parser(
        prog="varstar",
        description="Calibrated variable-star light curves: ensemble differential photometry, BJD_TDB, one HDF5 archive per target.",
    )
    p.add_argument("--version", action="version", version=f"varstar {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND", parser_class=_Parser)

    def add(name: str, func, help_: str) -> argparse.ArgumentParser:
        sp = sub.add_parser(name, help=help_, description=help_)
        sp.top = p
        sp.set_defaults(func=func)
        sp.add_argument("--json", action="store_true", help="print one JSON object on stdout instead of text")
        return sp

    sp = add("init", cmd_init, "create a new archive for a target described in a TOML file")
    sp.add_argument("archive", type=Path, help="archive file to create (e.g. target.h5)")
    sp.add_argument("target", type=Path, help="target description (TOML)")

    sp = add("ingest", cmd_ingest, "reduce a night's measurement tables and add them to the archive")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("files", type=Path, nargs="+", metavar="FILE",
                    help="measurement tables (CSV, long or wide form); the time column (jd) is JD(UTC) at mid-exposure "
                         "unless declared otherwise (--time-format, --time-system, --time-point)")
    sp.add_argument("--column", action="append", metavar="NAME=FILE_COLUMN",
                    help="read varstar column NAME from the file's FILE_COLUMN (repeatable; default: the file's own names)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")
    sp.add_argument("--replace", action="store_true",
                    help="replace a stored night of the same date with these files (e.g. the complete version of a file cut short)")
    sp.add_argument("--workers", type=int, default=None, metavar="N",
                    help="processes measuring FITS frames given instead of tables (default: one per core)")
    sp.add_argument("--time-format", choices=("jd", "mjd"),
                    help="what the time column holds: a Julian Date or an MJD (= JD - 2400000.5) (default: "
                         "[measurements] time_format of the target description, else jd)")
    sp.add_argument("--time-system", choices=("utc", "hjd_utc", "bjd_tdb"),
                    help="the time system of the time column (default: [measurements] time_system, else utc); "
                         "the archive stores JD(UTC) and computes BJD_TDB itself")
    sp.add_argument("--time-point", choices=("mid", "start", "end"),
                    help="which moment of the exposure the time is (default: [measurements] time_point, else mid); "
                         "start or end need the exposure time (column exptime) on every row")
    sp.add_argument("--accept-unusual", action="store_true",
                    help="store a night that cannot be what it claims (target below the horizon or the Sun up at its "
                         "exposures, no target rows, an airmass column far from the computed one), which is refused "
                         "by default; the reasons are recorded in the night's report")
    sp = add("measure", cmd_measure,
             "measure every star of a target description on FITS frames: aperture photometry, one measurement "
             "table (what ingest reads)")
    sp.add_argument("target", type=Path, help="target description (TOML) whose [[stars]] carry ra and dec")
    sp.add_argument("frames", type=Path, nargs="+", metavar="FRAMES",
                    help="FITS frames (.fits, .fit, .fts, optionally .gz) or folders of them; calibrated, or raw "
                         "with master bias, dark and flat named in [photometry]")
    sp.add_argument("-o", "--output", type=Path, default=Path("measurements.csv"), metavar="FILE",
                    help="the measurement table (CSV, '-' for standard output; default measurements.csv)")
    sp.add_argument("--workers", type=int, default=None, metavar="N", help="processes measuring frames (default: one per core)")

    sp = add("summary", cmd_summary, "overview of an archive: nights, bands, magnitude ranges")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")

    sp = add("report", cmd_report, "show the reduction report stored for one night, or write a report page (--html)")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("night", nargs="?", default=None,
                    help="night label (evening date, YYYY-MM-DD); with --html and no night: a page of the whole archive")
    sp.add_argument("--html", type=Path, metavar="FILE",
                    help="write a self-contained HTML page (figures inside, nothing fetched; '-' for standard output; "
                         "default: the text report on the terminal)")
    sp.add_argument("--open", action="store_true", help="open the page in the system browser when there is one (default: no)")

    sp = add("plot", cmd_plot, "plot the light curve (one panel per band; --by-night: one per night)")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("-o", "--output", type=Path, default=Path("lightcurve.png"), metavar="FILE",
                    help="image file (png, pdf, svg; default lightcurve.png)")
    sp.add_argument("--band", help="only this band (default: every band)")
    sp.add_argument("--star", help="star id (default: the target)")
    sp.add_argument("--night", help="only this night (evening date, YYYY-MM-DD; default: every night)")
    sp.add_argument("--include-flagged", "--show-flagged", dest="include_flagged", action="store_true",
                    help="also draw flagged points, hollow and grey (default: left out; "
                         "--show-flagged is its old name, kept for one release)")
    sp.add_argument("--by-night", nargs="?", type=int, const=12, default=None, metavar="N",
                    help="one panel per night (the latest N, default 12 when given), UT hours on each, a shared "
                         "magnitude axis per band, so each night's shape shows (default: the whole light curve "
                         "on one time axis; with --night, that night with its check stars)")

    sp = add("export", cmd_export, "write the light curve as neutral CSV, one observation a row")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("-o", "--output", type=Path, default=Path("observations.csv"), metavar="FILE",
                    help="CSV file ('-' for standard output; default observations.csv)")
    sp.add_argument("--band", help="only this band (default: every band)")
    sp.add_argument("--star", help="star id (default: the target)")
    sp.add_argument("--include-flagged", action="store_true",
                    help="also write flagged points, see the quality and flags columns (default: left out)")

    sp = add("coefficients", cmd_coefficients, "fit transformation coefficients (epsilon_v, mu_bv) from a standard field")
    sp.add_argument("files", type=Path, nargs="+", metavar="STANDARDS.csv", help="measurement tables of the standard field (B and V)")
    sp.add_argument("standards", type=Path, metavar="STANDARDS.toml", help="the standard stars with their catalogue B and V")
    sp.add_argument("-o", "--output", type=Path, help="plot of the two fits (png, pdf, svg; default: no plot)")
    sp.add_argument("--k2-bv", type=float, default=None, metavar="K",
                    help="second-order extinction of b - v to remove (mag per airmass per mag; default: not given, "
                         "0 assumed, and the output says what that assumption moves)")
    sp.add_argument("--k2-bv-err", type=float, default=0.0, metavar="K", help="its 1-sigma (default 0)")
    sp.add_argument("--save", type=Path, metavar="SETUPS.toml", help="add or replace the result as a setup in this setups file (default: not saved)")
    sp.add_argument("--setup", metavar="NAME", help="setup name to save under (default 'default')")
    sp.add_argument("--column", action="append", metavar="NAME=FILE_COLUMN",
                    help="read varstar column NAME from the file's FILE_COLUMN (repeatable; default: the file's own names)")

    sp = add("transform", cmd_transform, "apply transformation coefficients to every night of the archive (standard B, V and B - V)")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--coefficients", type=Path, metavar="FILE", help="a setups file or a TOML with a [transformation] table (default: the archive's current set)")
    sp.add_argument("--setup", metavar="NAME", help="which setup of the setups file (default: the file's only or 'default' setup)")
    sp.add_argument("--max-gap-minutes", "--max-gap", dest="max_gap_minutes", type=float, metavar="MINUTES",
                    help="largest time between paired V and B exposures (default: the coefficient set's max_gap_minutes, "
                         "as in the target file; --max-gap is its old name, kept for one release)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("colour", cmd_colour, "standard B - V of the target: range, temperature, plots")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--star", help="star id (default: the target)")
    sp.add_argument("--night", help="only this night (evening date, YYYY-MM-DD; default: every night)")
    sp.add_argument("-o", "--output", type=Path, metavar="FILE",
                    help="plot of B - V against time (and phase, with an [ephemeris]; default: no plot)")
    sp.add_argument("--diagram", type=Path, metavar="FILE", help="colour-magnitude diagram of the field for the night (default: the last night)")

    sp = add("period", cmd_period, "find the period: periodogram, PDM, aliases, harmonic fit; stored in the period history")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--band", default="all", help="a band, or 'all' for one multi-band periodogram (default all)")
    sp.add_argument("--star", help="star id (default: the target)")
    sp.add_argument("--min-period", type=float, metavar="DAYS", help="shortest trial period (default 0.05 d)")
    sp.add_argument("--max-period", type=float, metavar="DAYS", help="longest trial period (default: half the baseline, at most 1000 d)")
    sp.add_argument("--oversampling", type=float, default=10.0, metavar="N", help="grid points per peak width 1/baseline (default 10)")
    sp.add_argument("--terms", type=int, default=1, metavar="K",
                    help="SEARCH: harmonics per trial frequency of the periodogram that finds the period (1 = a "
                         "sinusoid; 2 or 3 find eclipsing binaries and other non-sinusoidal stars; default 1); "
                         "not --harmonics")
    sp.add_argument("--harmonics", type=int, metavar="N",
                    help="FIT: harmonics of the light-curve model fitted at the period found, which gives the "
                         "period's error, epoch and amplitude (default: chosen by AIC); not --terms")
    sp.add_argument("--bootstrap", type=int, default=0, metavar="N", help="also a bootstrap false-alarm probability from N resamples (default 0: none)")
    sp.add_argument("--seed", type=int, metavar="S", help="seed of the bootstrap (default 0)")
    sp.add_argument("--single", action="store_true", help="fit the main period alone (by default further significant frequencies are found and fitted together)")
    sp.add_argument("--snr", type=float, default=4.0, metavar="S", help="a further frequency needs this amplitude S/N (default 4)")
    sp.add_argument("--max-frequencies", type=int, default=8, metavar="N", help="at most N frequencies in the model (default 8)")
    sp.add_argument("--include-flagged", action="store_true", help="also use points of flagged exposures (default: left out)")
    sp.add_argument("--no-store", action="store_true", help="do not record the result in the archive")
    sp.add_argument("--history", action="store_true", help="list the stored analyses instead of running one")
    sp.add_argument("-o", "--output", type=Path, metavar="FILE", help="periodogram plot (png, pdf, svg; default: no plot)")
    sp.add_argument("--phased", type=Path, metavar="FILE", help="phased light curve with the fit and residuals (default: no plot)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("timings", cmd_timings, "time the minima or maxima the nights cover; O − C and an ephemeris fit")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--band", help="only this band (default: every band)")
    sp.add_argument("--kind", choices=("minimum", "maximum"), help="which extrema (default: the ephemeris' kind)")
    sp.add_argument("--night", help="only this night (evening date, YYYY-MM-DD; default: every night)")
    sp.add_argument("--note", help="a note stored with each new timing (default: none)")
    sp.add_argument("--update", action="store_true", help="make the fitted ephemeris the archive's new ephemeris (older ones are kept)")
    sp.add_argument("--no-store", action="store_true", help="do not record new timings in the archive")
    sp.add_argument("--include-disagreeing", action="store_true",
                    help="use in the ephemeris fit also the timings whose two estimates disagree beyond the usual "
                         "difference between the methods (left out by default, and listed)")
    sp.add_argument("--seed", type=int, default=0, metavar="S", help="seed of the bootstrap errors (default 0)")
    sp.add_argument("-o", "--output", type=Path, metavar="FILE", help="O − C diagram (png, pdf, svg; default: no plot)")
    sp.add_argument("--csv", type=Path, metavar="FILE", help="write the timings as CSV, one a row (default: no CSV)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("predict", cmd_predict, "the coming minima or maxima from the ephemeris in force, in UTC and BJD_TDB")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--from", dest="start", required=True, metavar="DATE", help="start, UTC: YYYY-MM-DD, YYYY-MM-DDTHH:MM or a JD")
    sp.add_argument("--to", dest="end", required=True, metavar="DATE", help="end, UTC")
    sp.add_argument("--site-visible", action="store_true", help="only those observable from the target's site at night (default: all)")
    sp.add_argument("--min-altitude", type=float, default=30.0, metavar="DEG", help="lowest target altitude (default 30)")
    sp.add_argument("--sun-altitude", type=float, default=-12.0, metavar="DEG", help="highest Sun altitude (default -12, nautical twilight)")

    sp = add("verify", cmd_verify, "check an archive: schema, tables, checksums of every night, points against raw data")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")

    sp = add("upgrade", cmd_upgrade, "bring an archive of an older schema up to date (keeps a backup copy)")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("remove-night", cmd_remove_night, "take a wrongly ingested night out of an archive (the removal is recorded)")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("night", help="night label (evening date, YYYY-MM-DD)")
    sp.add_argument("--reason", metavar="TEXT",
                    help="why, recorded in the archive with the removal (default: asked for in a terminal; "
                         "a script without it records no reason)")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("edit-target", cmd_edit_target,
             "change the archive's target description (a new TOML, or single keys); earlier versions are kept and "
             "the nights the change affects are reduced again from their raw measurements, all in one change")
    sp.add_argument("archive", type=Path, help="the target's archive (HDF5)")
    sp.add_argument("description", type=Path, nargs="?",
                    help="a whole new target description (TOML); default: edit the one in force with --set/--unset")
    sp.add_argument("--set", action="append", metavar="KEY=VALUE",
                    help="set one key (repeatable): a dotted path, stars by id, a TOML value, e.g. "
                         "--set 'reduction.exclude=[\"C4\"]', --set stars.C2.V_err=0.02, --set ephemeris.period=0.5672, "
                         "--set 'stars.C9={role = \"comparison\", V = 12.5}' (default: no key set)")
    sp.add_argument("--unset", action="append", metavar="KEY", help="remove one key (repeatable), e.g. --unset stars.C2.B_err (default: none removed)")
    sp.add_argument("--note", metavar="TEXT", help="why the description changed, kept in its history (default: none)")
    sp.add_argument("--dry-run", action="store_true", help="say what would change and which nights, and change nothing")
    sp.add_argument("--accept-unusual", action="store_true",
                    help="re-reduce nights the new description makes implausible (target below the horizon, ...) anyway")
    sp.add_argument("--show", nargs="?", type=int, const=-1, default=None, metavar="N",
                    help="print the description in force (default) or version N as TOML, and change nothing")
    sp.add_argument("--history", action="store_true", help="list every version of the description, and change nothing")
    sp.add_argument("--wait", type=float, default=30.0, metavar="SECONDS", help="how long to wait for another writer (default 30)")

    sp = add("demo", cmd_demo, "run the whole pipeline on the shipped invented demo field")
    sp.add_argument("-o", "--out", type=Path, default=None, help="folder for the results (default: a new folder here)")

    from .fleet.commands import add_fleet_commands

    add_fleet_commands(sub, p, add)
    return p


def _json_asked(argv: Sequence[str]) -> bool:
    """Whether ``--json`` is on the command line (before a ``--``), for errors found while parsing it."""
    for a in argv:
        if a == "--":
            return False
        if a == "--json":
            return True
    return False


def _print_json_error(message: str, code: int, result: dict[str, Any] | None = None) -> None:
    """The one JSON object of a failed command: the message and the exit code, beside the fields of the
    result it had (``verify``'s report: ``ok``, ``problems``...), which keep their places."""
    import json

    obj: dict[str, Any] = {}
    if result is not None:
        from .export import to_json

        obj.update(json.loads(to_json(result)))
    obj.update(error=message, exit_code=code)
    sys.stdout.write(json.dumps(obj, ensure_ascii=False, allow_nan=False) + "\n")


def main(argv: Sequence[str] | None = None) -> int:
    from .errors import VarstarError

    from .threads import limit_blas_threads

    argv = list(sys.argv[1:] if argv is None else argv)
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as stop:  # --help, --version (0) or a usage mistake (argparse printed it on stderr)
        if stop.code not in (0, None) and _json_asked(argv):
            code = stop.code if isinstance(stop.code, int) else EXIT_CODES["usage"]
            _print_json_error(getattr(parser, "last_error", None) or "bad command line (see --help)", code)
        raise
    as_json = bool(getattr(args, "json", False))
    try:
        _check_outputs(args)  # before any work: a result that cannot be written is refused first
        # One BLAS thread: the commands solve many small problems, for which threads cost more than
        # they save (measured: benchmarks/bench_period.py --threads, bench_ingest.py --threads).
        with limit_blas_threads():
            return int(args.func(args) or 0)
    except VarstarError as exc:
        sys.stderr.write(f"error: {exc}\n")
        if as_json:  # results are printed only at the end, so stdout is still empty
            _print_json_error(str(exc), exc.exit_code, getattr(exc, "result", None))
        return exc.exit_code
    except KeyboardInterrupt:
        sys.stderr.write("interrupted; the archive is unchanged\n")
        if as_json:
            _print_json_error("interrupted; the archive is unchanged", EXIT_CODES["interrupted"])
        return EXIT_CODES["interrupted"]
    except BrokenPipeError:  # e.g. piped into head
        return 0
    except Exception as exc:  # a bug: the traceback stays (Python exits 1); scripts still get one JSON object
        if as_json:
            _print_json_error(f"internal error ({type(exc).__name__}: {exc}); please report it with the traceback",
                              EXIT_CODES["bug"])
        raise


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

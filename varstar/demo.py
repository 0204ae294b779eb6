"""``varstar demo``: the whole pipeline on the shipped invented demo field.

The demo series (the invented field "Wren-Hollow 7", six nights of interleaved
B and V) is regenerated from :mod:`varstar.simulate` with its fixed seed, so it
is byte-for-byte the series kept in ``demo_series/`` of the source tree; then
the archive is created, each night ingested in turn, and the summary, the
light-curve plot and the CSV export are written.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

from . import text
from .errors import OutputError


def _new_folder(out: Path | None) -> Path:
    if out is not None:
        out = Path(out)
        if out.exists() and not out.is_dir():
            raise OutputError(f"{out}: is a file, not a folder; choose another --out")
        if out.exists() and any(out.iterdir()):
            raise OutputError(f"{out}: folder exists and is not empty; choose another --out")
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"{out}: cannot create folder ({exc.strerror})") from None
        return out
    k = 1
    while True:
        cand = Path.cwd() / ("varstar-demo" if k == 1 else f"varstar-demo-{k}")
        try:
            cand.mkdir()
            return cand
        except FileExistsError:
            k += 1
        except OSError as exc:
            raise OutputError(f"{cand}: cannot create folder ({exc.strerror})") from None


def run_demo(out: Path | None = None, echo: Callable[[str], Any] | None = print) -> dict[str, Any]:
    """Run the demo into ``out`` (default: a new ``varstar-demo`` folder here).

    The steps are those of an observer: fit transformation coefficients from a
    standard field, create the target's archive, ingest each night, put the
    archive on the standard system, look at the light curve and colours, find
    the period, and time the maxima against the target's older ephemeris.
    Returns a JSON-ready dict: the folder, the files written and the summaries.
    """
    from .export import lightcurve_table, to_json, write_atomic, write_csv
    from .simulate import demo_files

    say = echo or (lambda _s: None)
    folder = _new_folder(out)
    data = folder / "data"
    data.mkdir()
    for name, content in demo_files().items():
        write_atomic(data / name, content.encode("utf-8"))
    say(f"Demo data written to {data} (an invented field and standard field, simulated with a fixed seed)\n")

    files: list[Path] = []
    fit, setups = _coefficients(data, folder, files, say)
    arch, reports = _archive(data, folder, setups, files, say)
    reports.append(_frames_night(arch.path, data, say))
    summary = arch.summary().to_dict()
    say(text.format_summary(summary))
    colour = _look(arch, folder, files, say)
    found = _period(arch, folder, files, say)
    timed = _timings(arch, folder, files, say)
    _pages(arch, folder, files, say)
    csv = write_csv(lightcurve_table(arch.lightcurve()), folder / "observations.csv")
    result = {"summary": summary, "coefficients": fit.to_dict(), "colour": colour, "period": found.to_dict(),
              "timings": timed}
    js = write_atomic(folder / "summary.json", (to_json(result, indent=2) + "\n").encode("utf-8"))
    return {
        "folder": str(folder),
        "files": [str(p) for p in (*files, csv, js)],
        "nights": [r["night"] for r in reports],
        **result,
    }


def _coefficients(data: Path, folder: Path, files: list[Path], say: Callable[[str], Any]):
    """1. Transformation coefficients from the standard field, saved as a setup; k''_bv is the usual
    value for B - V (common practice), as an observer without their own measurement would take."""
    from .plots import coefficient_figure, save
    from .setups import save_setup
    from .standards import fit_standard_field

    k2_bv = -0.03
    fit = fit_standard_field([data / "standards.csv"], data / "standards.toml", k2_bv=k2_bv)
    setups = folder / "setups.toml"
    save_setup(setups, "demo-camera", fit.coefficients("standards.toml fit", k2_bv=k2_bv), {"fitted from": "standards.toml"})
    fits_png = folder / "coefficients.png"
    save(coefficient_figure(fit), fits_png)
    files += [setups, fits_png]
    say(text.format_coefficients({**fit.to_dict(), "k2_bv": k2_bv}, k2_bv) + f"\n  saved in {setups}\n")
    return fit, setups


def _archive(data: Path, folder: Path, setups: Path, files: list[Path], say: Callable[[str], Any]):
    """2-3. The target's archive, night by night from the measurement tables, then onto the standard system."""
    from .export import safe_filename
    from .setups import read_setup
    from .target import read_target
    from .workflows.archive import create_archive, open_archive
    from .workflows.night import ingest
    from .workflows.standard import transform_archive

    target = read_target(data / "target.toml")
    archive = folder / f"{safe_filename(target.name)}.h5"
    create_archive(archive, target)
    files.insert(0, archive)
    say(f"created {archive}\n")
    reports = []
    for p in sorted(data.glob("night-*.csv")):
        for rep in ingest(archive, [p]).nights:
            reports.append(rep)
            say(text.format_night_report(rep) + "\n")
    coeffs, gap = read_setup(setups, "demo-camera")
    trans = transform_archive(archive, coeffs, gap)
    n_done = sum(n["n_transformed"] for n in trans["nights"])
    say(f"transformed {n_done} of {sum(n['n_points'] for n in trans['nights'])} points to the standard system\n")
    return open_archive(archive), reports


#: The demo's night of FITS frames: after the six nights of measurement tables (an invented plan).
FRAMES_NIGHT = "2026-10-14"


def _frames_night(archive: Path, data: Path, say: Callable[[str], Any]) -> dict[str, Any]:
    """3b. A night of FITS frames: varstar measures them (aperture photometry) and stores the night like the others.

    Measuring needs each star's position and the name the camera gives the B
    filter, so the target description gains them first (``edit-target``: no
    stored night changes); the frames are drawn by :func:`varstar.simulate.write_frames`
    for one more night of the same invented scenario.
    """
    import dataclasses

    from .simulate import demo_scenario, frame_target_toml, write_frames
    from .simulate.scenario import NightPlan
    from .workflows.describe import edit_target
    from .workflows.night import ingest

    edit = edit_target(archive, text=frame_target_toml(), note="star positions and the B filter's name, to measure frames")
    say(f"target description {edit.description}: star positions and [photometry.filters] added "
        f"({text.plural(len(edit.rereduced), 'night')} changed by it)\n")
    sc = demo_scenario()
    sc = dataclasses.replace(sc, nights=(*sc.nights, NightPlan(FRAMES_NIGHT, start_delay_h=0.3, max_hours=3.5)))
    fs = write_frames(data / "frames", scenario=sc, night=FRAMES_NIGHT, n_frames=60)
    say(f"drew {text.plural(len(fs.paths), 'FITS frame')} of night {FRAMES_NIGHT} into {fs.folder} (invented, "
        f"with their truth in truth.csv); measuring and ingesting them:\n")
    res = ingest(archive, [fs.folder])
    rep = res.nights[0]
    say(text.format_night_report(rep) + "\n")
    return rep


def _look(arch: Any, folder: Path, files: list[Path], say: Callable[[str], Any]) -> dict[str, Any]:
    """4. The light curve (and the cloudy night close up), the colours, the field's diagram."""
    from .colour import colour_summary, phases
    from .plots import colour_figure, colour_magnitude_figure, lightcurve_figure, save
    from .workflows.standard import field_diagram

    target = arch.target
    star = target.target_star.id
    lc_all = arch.lightcurve(include_flagged=True)
    plot = folder / "lightcurve.png"
    save(lightcurve_figure(lc_all, title=f"{target.name}: {star}", show_flagged=True), plot)
    files.append(plot)
    nights = arch.nights()
    if int(nights["n_flagged"].max()) > 0:  # zoom on the night with passing clouds
        label = str(nights.loc[nights["n_flagged"].idxmax(), "night"])
        zoom = folder / f"night-{label}.png"
        save(lightcurve_figure(lc_all[lc_all["night"] == label], title=f"{target.name}: {star}, night {label}", show_flagged=True), zoom)
        files.append(zoom)
    lc = arch.lightcurve()
    colour = colour_summary(lc, target)
    say("\n" + text.format_colour(colour))
    colour_png = folder / "colour.png"
    eph = colour.get("ephemeris")
    save(colour_figure(lc, title=f"{target.name}: {star}", phase=phases(lc["bjd_tdb"].to_numpy(), target),
                       period=eph["period"] if eph else None), colour_png)
    last = str(nights["night"].iloc[-1])
    field, track = field_diagram(arch, last)
    cmd_png = folder / f"colour-magnitude-{last}.png"
    save(colour_magnitude_figure(field, track, title=f"{target.name}, night {last}"), cmd_png)
    files += [colour_png, cmd_png]
    return colour


def _period(arch: Any, folder: Path, files: list[Path], say: Callable[[str], Any]):
    """5. The period, from B and V together; recorded in the archive's period history."""
    from .plots import period_figures, save

    found = arch.period()
    say("\n" + text.format_period(found.to_dict()))
    pg_png, ph_png = folder / "periodogram.png", folder / "phased.png"
    for fig, path in zip(period_figures(found, f"{arch.target.name}: {arch.target.target_star.id}"), (pg_png, ph_png)):
        save(fig, path)
    files += [pg_png, ph_png]
    return found


def _pages(arch: Any, folder: Path, files: list[Path], say: Callable[[str], Any]) -> None:
    """7. Report pages to look at: the whole archive, and the night with passing clouds (self-contained HTML)."""
    from .report import archive_page, night_page, write_page

    nights = arch.nights()
    label = str(nights.loc[nights["n_flagged"].idxmax(), "night"])
    whole, one = folder / "archive.html", folder / f"night-{label}.html"
    write_page(archive_page(arch.path), whole)
    write_page(night_page(arch.path, label), one)
    files += [whole, one]
    say(f"\nreport pages (open them in any browser; they need no network): {whole} and {one}")


def _timings(arch: Any, folder: Path, files: list[Path], say: Callable[[str], Any]) -> dict[str, Any]:
    """6. Times of maximum light, O - C against the target's older ephemeris, and an updated ephemeris."""
    from .export import timings_table, write_csv
    from .plots import save, timings_figure

    timed = arch.time_extrema(update=True).to_dict()
    say("\n" + text.format_timings(timed))
    oc_png, timings_csv = folder / "o-c.png", folder / "timings.csv"
    save(timings_figure(timed, f"{arch.target.name}: O − C"), oc_png)
    write_csv(timings_table(timed["timings"]), timings_csv)
    files += [oc_png, timings_csv]
    return timed

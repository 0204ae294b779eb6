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

    Returns a JSON-ready dict: the folder, the files written and the archive summary.
    """
    from .archive import create_archive
    from .cli import format_night_report, format_summary
    from .export import lightcurve_table, safe_filename, to_json, write_atomic, write_csv
    from .night import ingest
    from .plots import lightcurve_figure, save
    from .simulate import demo_scenario, simulate, write_series
    from .target import read_target

    say = echo or (lambda _s: None)
    folder = _new_folder(out)
    data = folder / "data"
    scenario = demo_scenario()
    write_series(simulate(scenario), scenario, data)
    say(f"Demo field written to {data} (invented stars, simulated with a fixed seed)")

    target = read_target(data / "target.toml")
    archive = folder / f"{safe_filename(target.name)}.h5"
    create_archive(archive, target)
    say(f"created {archive}\n")
    nights = sorted(p for p in data.glob("night-*.csv"))
    reports = []
    for p in nights:
        res = ingest(archive, [p])
        for rep in res.nights:
            reports.append(rep)
            say(format_night_report(rep) + "\n")

    from .archive import open_archive

    arch = open_archive(archive)
    summary = arch.summary()
    say(format_summary(summary))
    lc = arch.lightcurve(include_flagged=True)
    plot = folder / "lightcurve.png"
    save(lightcurve_figure(lc, title=f"{target.name}: {target.target_star.id}", show_flagged=True), plot)
    files = [archive, plot]
    nights_df = arch.nights()
    if int(nights_df["n_flagged"].max()) > 0:  # zoom on the night with passing clouds
        label = str(nights_df.loc[nights_df["n_flagged"].idxmax(), "label"])
        zoom = folder / f"night-{label}.png"
        save(lightcurve_figure(lc[lc["night"] == label], title=f"{target.name}: {target.target_star.id}, night {label}", show_flagged=True), zoom)
        files.append(zoom)
    csv = write_csv(lightcurve_table(arch.lightcurve()), folder / "observations.csv")
    js = write_atomic(folder / "summary.json", (to_json(summary, indent=2) + "\n").encode("utf-8"))
    return {
        "folder": str(folder),
        "files": [str(p) for p in (*files, csv, js)],
        "nights": [r["night"] for r in reports],
        "summary": summary,
    }

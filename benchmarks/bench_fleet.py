"""Wall time of ingesting a fleet: the Dask engine with 1 and 2 workers against the serial loop.

N invented targets (default 200), each one night of 300 exposures x 12 stars x 2
bands (``varstar.simulate.synthetic_night``, fixed seeds), generated once into a
temporary folder outside the timed part.  Timed, each on fresh copies of the empty
archives made by ``varstar.fleet.init_fleet``:

- serial: ``varstar.ingest(archive, files)`` per archive, one after another, in this process;
- ``varstar.fleet.ingest_fleet`` with a local engine of 1 worker, then of 2 workers
  (each call starts and stops its own cluster: that cost is in the figure).

Prints the wall times, the speed-ups against the serial loop and the engine's
per-target overhead ((wall with 1 worker - serial) / N).  Goals: 2 workers >= 1.8x
the serial loop; overhead < 50 ms a target.

    python benchmarks/bench_fleet.py [--targets N] [--exposures 300] [--stars 12] [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path


def generate(root: Path, n_targets: int, n_exposures: int, n_stars: int) -> tuple[list[Path], Path]:
    """Target descriptions and one night file per target (invented fields, fixed seeds)."""
    from varstar.simulate import measurements_csv, synthetic_night

    tomls, inbox = [], root / "inbox"
    inbox.mkdir(parents=True)
    for k in range(n_targets):
        name = f"Bench Field {k:04d}"
        t, df = synthetic_night(n_exposures, n_stars, bands=("B", "V"), seed=k, field_seed=10_000 + k,
                                ra_deg=(320.0 + 0.3 * k) % 360.0, dec_deg=-5.0 + (k % 30), start_jd=2461300.75)
        t = t.replace(f'name = "Synthetic field (field seed {10_000 + k}, invented)"', f'name = "{name}"')
        toml = root / f"target-{k:04d}.toml"
        toml.write_text(t, encoding="utf-8")
        tomls.append(toml)
        (inbox / f"Bench_Field_{k:04d}_2026-09-16.csv").write_text(measurements_csv(df), encoding="utf-8")
    return tomls, inbox


def fresh_fleet(template: Path, dest: Path) -> Path:
    if dest.exists():
        shutil.rmtree(dest)
    shutil.copytree(template, dest)
    return dest


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--targets", type=int, default=200, help="number of targets (default 200)")
    ap.add_argument("--exposures", type=int, default=300, help="exposures per band and night (default 300)")
    ap.add_argument("--stars", type=int, default=12, help="stars per field (default 12)")
    ap.add_argument("--keep", type=Path, default=None, help="work in this folder and keep it (default: a temporary one)")
    args = ap.parse_args()

    import varstar
    from varstar.fleet import ingest_fleet, init_fleet, open_fleet
    from varstar.threads import limit_blas_threads

    root = args.keep or Path(tempfile.mkdtemp(prefix="varstar-bench-fleet-"))
    root.mkdir(parents=True, exist_ok=True)
    n = args.targets
    try:
        t0 = time.perf_counter()
        tomls, inbox = generate(root, n, args.exposures, args.stars)
        init_fleet(root / "template", tomls)
        print(f"{n} targets x 1 night x {args.exposures} exposures x {args.stars} stars x 2 bands; "
              f"generated in {time.perf_counter() - t0:.1f} s (not timed); cores: {os.cpu_count()}")

        fleet = open_fleet(fresh_fleet(root / "template", root / "serial"))
        files = sorted(inbox.iterdir())
        t0 = time.perf_counter()
        with limit_blas_threads():  # as each fleet task does
            for entry, f in zip(fleet.entries, files):
                varstar.ingest(entry.archive, [f])
        serial = time.perf_counter() - t0

        walls = {}
        for workers in (1, 2):
            fleet = open_fleet(fresh_fleet(root / "template", root / f"w{workers}"))
            t0 = time.perf_counter()
            res = ingest_fleet(fleet, [inbox], workers=workers)
            walls[workers] = time.perf_counter() - t0
            if res.n_failed or res.unmatched or res.ambiguous or len(res.targets) != n:
                print(f"unexpected result with {workers} workers: {res.n_failed} failed", file=sys.stderr)
                return 1

        print(f"serial loop (ingest per archive, one process): {serial:8.2f} s   ({1000 * serial / n:.0f} ms a target)")
        for w, wall in walls.items():
            print(f"ingest_fleet, {w} worker{'s' if w > 1 else ' '}:                  {wall:8.2f} s   "
                  f"speed-up vs serial {serial / wall:.2f}x")
        overhead = (walls[1] - serial) / n
        print(f"engine overhead per target ((1 worker - serial) / N): {1000 * overhead:.1f} ms  (goal < 50 ms)")
        print(f"2 workers vs serial: {serial / walls[2]:.2f}x  (goal >= 1.8x)")
    finally:
        if args.keep is None:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":  # the guard matters: the engine's worker processes are spawned
    sys.exit(main())

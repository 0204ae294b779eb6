"""Benchmark: ``varstar edit-target`` on an archive of many nights, as a user runs it.

An archive of N synthetic nights (invented field, :func:`varstar.simulate.synthetic_night`,
fixed seeds; 200 exposures x 12 stars x 2 bands a night by default) is built once
through ``varstar ingest`` (one process per night, timed: the reference).  Then,
each as a whole process on a fresh copy:

* ``edit-target --set 'target.name=...'``: a change no reduction reads (no night reduced again);
* ``edit-target --set 'reduction.exclude=["C3"]' --dry-run``: every night reduced again, nothing written;
* ``edit-target --set 'reduction.exclude=["C3"]'``: every night reduced again and stored, in one change;

and ``varstar verify`` after the last.  It prints wall times and the time per
night against the ingest of the same nights measured in the same run (the
machine is shared: compare ratios).  This is a script that prints figures,
never a test.

Usage::

    python benchmarks/bench_edit_target.py [--nights 30] [--exposures 200] [--stars 12]
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def run(*argv: str) -> float:
    t = time.perf_counter()
    p = subprocess.run([sys.executable, "-m", "varstar.cli", *argv], capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"varstar {' '.join(argv)} failed ({p.returncode}):\n{p.stderr}")
    return time.perf_counter() - t


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--nights", type=int, default=30)
    ap.add_argument("--exposures", type=int, default=200)
    ap.add_argument("--stars", type=int, default=12)
    args = ap.parse_args()

    import numpy as np

    from varstar.simulate import measurements_csv, synthetic_night

    with tempfile.TemporaryDirectory(prefix="varstar-bench-edit-") as tmp:
        d = Path(tmp)
        files = []
        for i in range(args.nights):
            toml, df = synthetic_night(args.exposures, args.stars, seed=np.random.default_rng([7, i]),
                                       start_jd=2461300.75 + i, field_seed=7, night_hours=5.0)
            f = d / f"night-{i:03d}.csv"
            f.write_text(measurements_csv(df))
            files.append(f)
        (d / "target.toml").write_text(toml)
        arch = d / "a.h5"
        run("init", str(arch), str(d / "target.toml"))
        t_ingest = sum(run("ingest", str(arch), str(f)) for f in files)
        n = args.nights
        print(f"{n} nights x {args.exposures} exposures x {args.stars} stars x 2 bands")
        print(f"ingest, one process per night:        {t_ingest:7.2f} s  ({t_ingest / n * 1000:6.0f} ms a night)")
        rows = []
        for label, argv in (
            ("name only (no night reduced)", ["--set", "target.name=Renamed field"]),
            ("exclude C3, --dry-run", ["--set", 'reduction.exclude=["C3"]', "--dry-run"]),
            ("exclude C3, stored", ["--set", 'reduction.exclude=["C3"]']),
        ):
            copy = d / "copy.h5"
            shutil.copyfile(arch, copy)
            t = run("edit-target", str(copy), *argv)
            rows.append((label, t))
            print(f"edit-target {label:30s} {t:7.2f} s  ({t / n * 1000:6.0f} ms a night; "
                  f"{t / t_ingest:4.2f} x the ingest of all nights)")
        t_verify = run("verify", str(d / "copy.h5"))
        print(f"verify after the edit:                {t_verify:7.2f} s")


if __name__ == "__main__":
    main()

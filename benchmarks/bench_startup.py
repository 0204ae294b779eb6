"""Benchmark: how long ``varstar --help`` takes as a whole process (goal: under 0.3 s).

Runs the installed command and, side by side in the same run, a bare
``python -c pass`` (the floor: the interpreter's own start-up), each
``--repeats`` times, and prints the medians and their difference.  The machine
is shared, so compare the two columns of one run, not figures across runs.
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import time


def _wall(cmd: list[str]) -> float:
    t = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=15)
    args = ap.parse_args(argv)
    exe = shutil.which("varstar") or str(__import__("pathlib").Path(sys.executable).with_name("varstar"))
    runs = {"python -c pass": [sys.executable, "-c", "pass"], "varstar --help": [exe, "--help"],
            "python -m varstar.cli --help": [sys.executable, "-m", "varstar.cli", "--help"]}
    for cmd in runs.values():  # warm the file cache
        _wall(cmd)
    times = {k: [] for k in runs}
    for _ in range(args.repeats):
        for k, cmd in runs.items():  # interleaved, so a busy moment hits all alike
            times[k].append(_wall(cmd))
    floor = statistics.median(times["python -c pass"])
    for k, ts in times.items():
        med = statistics.median(ts)
        print(f"{k:32s} median {med * 1000:7.1f} ms  (min {min(ts) * 1000:6.1f} ms; {med / floor:4.2f}x the bare interpreter)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

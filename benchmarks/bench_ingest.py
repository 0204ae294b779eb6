"""Benchmark: reduce and ingest one synthetic night into a fresh archive.

The night comes from :func:`varstar.simulate.synthetic_night` (invented field,
fixed seed): by default 2,000 exposures in each of B and V, 30 stars, about
120,000 measurement rows.  It is written once to a temporary folder as
``target.toml`` and ``night.csv`` (by a child process, so that this parent stays
small); then, for each repeat, a *fresh* Python process (so that its peak
resident memory is the ingest's own) creates an archive and times

* the first ``varstar.workflows.night.ingest`` call of the process (cold: it pays for the
  lazy imports of astropy and the first time-scale set-up, as the command line does),
* a second ingest into another new archive (warm),
* the stages of a warm ingest one by one: reading the file, parsing and
  validating it (``measurements.parse_measurements``), the times (``timescale.
  exposure_times``: BJD_TDB, HJD, airmass), the whole night reduction
  (``night.reduce_night``: times + ensemble + report) and, as the remainder, the
  archive write (lock, appends into the in-memory overlay, journal commit),
* the peak of Python allocations (``tracemalloc``, which sees numpy buffers but
  not HDF5's own C allocations) during a third ingest.

Separately, the whole command ``python -m varstar.cli ingest`` is run as a child
process and timed end to end, with its own peak RSS from ``os.wait4``.

``--threads``: the effect of the BLAS library's threads (OpenBLAS starts one per
core; the night's many small least-squares problems do not gain from them).  The
whole command is timed, alternating within each repeat, as shipped, without any
thread limit (the command's function called without ``varstar.cli.main``),
with ``OPENBLAS_NUM_THREADS=1`` and inside :func:`varstar.threads.limit_blas_threads`
(threadpoolctl); and in the worker a warm ``reduce_night`` with and without the
limit (best of two each).

Note on the seed: with the default sizes the exposures are 5 s long and the
faintest stars have low signal-to-noise; some seeds (e.g. 1) give a few rows
with ``mag_err`` > 5 mag, which the measurement parser rightly refuses.  Seed 0
gives none.

The figures printed are medians over the repeats.  Goals: cold ingest < 2 s wall,
peak RSS < 500 MB.  This is a script that prints figures, never a test.

Usage::

    python benchmarks/bench_ingest.py [--repeats 3] [--exposures 2000] [--stars 30] [--seed 0] [--threads]
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
GOAL_WALL_S = 2.0
GOAL_RSS_MB = 500.0


def _maxrss_mb(usage: resource.struct_rusage) -> float:
    # Linux reports kilobytes, macOS bytes.
    return usage.ru_maxrss / (1024.0 * 1024.0 if sys.platform == "darwin" else 1024.0)


def _peak_mb() -> float:
    """Peak resident memory of this process so far.

    Linux: ``VmHWM`` of /proc/self/status, the high-water mark of this program's
    own address space.  (``ru_maxrss`` survives fork and exec, so a child starts
    with its parent's peak; the parent here stays small for that reason.)
    Elsewhere: ``ru_maxrss``.
    """
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return _maxrss_mb(resource.getrusage(resource.RUSAGE_SELF))


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


# ----------------------------------------------------------------------------- worker
def worker(folder: Path, trace: bool = True, threads: bool = False) -> dict[str, float]:
    """Run in a fresh process: time one cold ingest, one warm ingest and its stages."""
    t = time.perf_counter()
    from varstar.workflows.archive import create_archive
    from varstar.measurements import parse_measurements, read_bytes
    from varstar.workflows.night import ingest
    from varstar.workflows.reduce import reduce_night
    from varstar.target import read_target
    from varstar.timescale import exposure_times

    out: dict[str, float] = {"import_s": time.perf_counter() - t}
    out["rss_after_import_mb"] = _peak_mb()
    target = read_target(folder / "target.toml")
    csv = folder / "night.csv"
    tag = f"{os.getpid()}"

    def fresh_archive(name: str) -> Path:
        p = folder / f"{name}-{tag}.h5"
        create_archive(p, target)
        return p

    # Cold: the first ingest of the process, as `varstar ingest` would run it.
    arch = fresh_archive("cold")
    t = time.perf_counter()
    res = ingest(arch, [csv])
    out["ingest_cold_s"] = time.perf_counter() - t
    out["rss_peak_mb"] = _peak_mb()
    rep = res.nights[0]
    out["n_measurements"] = rep["n_measurements"]
    out["n_exposures"] = rep["n_exposures"]
    out["archive_mb"] = arch.stat().st_size / 1e6

    # Warm: a second whole ingest, then the stages one by one.
    arch = fresh_archive("warm")
    t = time.perf_counter()
    ingest(arch, [csv])
    out["ingest_warm_s"] = time.perf_counter() - t

    t = time.perf_counter()
    data = read_bytes(csv)
    out["read_s"] = time.perf_counter() - t
    t = time.perf_counter()
    table = parse_measurements(data, str(csv), target.star_ids)
    out["parse_s"] = time.perf_counter() - t
    exp_jd = table.drop_duplicates(["frame", "band"])["jd"].to_numpy()
    site = target.site
    t = time.perf_counter()
    exposure_times(exp_jd, target.ra_deg, target.dec_deg, site.latitude_deg, site.longitude_deg, site.elevation_m)
    out["times_s"] = time.perf_counter() - t
    t = time.perf_counter()
    reduce_night(target, table)
    out["reduce_s"] = time.perf_counter() - t
    out["write_s"] = out["ingest_warm_s"] - out["read_s"] - out["parse_s"] - out["reduce_s"]
    out["rss_peak_after_stages_mb"] = _peak_mb()
    if threads:
        from varstar.threads import blas_thread_counts, limit_blas_threads

        out["blas_threads_default"] = max(blas_thread_counts().values(), default=0)
        best = {"reduce_unlimited_s": float("inf"), "reduce_limited_s": float("inf")}
        for _ in range(2):  # alternate, keep the best of each
            t = time.perf_counter()
            reduce_night(target, table)
            best["reduce_unlimited_s"] = min(best["reduce_unlimited_s"], time.perf_counter() - t)
            with limit_blas_threads():
                t = time.perf_counter()
                reduce_night(target, table)
                best["reduce_limited_s"] = min(best["reduce_limited_s"], time.perf_counter() - t)
        out.update(best)

    # Python allocations (numpy buffers included) during one more ingest.
    if trace:
        import tracemalloc

        arch = fresh_archive("traced")
        tracemalloc.start()
        ingest(arch, [csv])
        out["tracemalloc_peak_mb"] = tracemalloc.get_traced_memory()[1] / 1024.0**2
        tracemalloc.stop()
    return out


def probe() -> dict[str, float]:
    """Run in a fresh process: the one-time costs a cold ingest pays on top of a warm one."""
    import numpy as np

    import varstar.archive  # noqa: F401  (numpy, pandas, h5py: loaded before ingest starts)
    import varstar.workflows.night  # noqa: F401

    out: dict[str, float] = {}
    t = time.perf_counter()
    import scipy.stats  # noqa: F401  (the ensemble's significance tests import it lazily)

    out["scipy_import_s"] = time.perf_counter() - t
    t = time.perf_counter()
    import astropy.coordinates  # noqa: F401
    import astropy.time  # noqa: F401

    out["astropy_import_s"] = time.perf_counter() - t
    from varstar.timescale import exposure_times

    jd = np.array([2461300.70, 2461300.80])
    t = time.perf_counter()
    exposure_times(jd, 341.7625, 18.6083, 34.21, -108.39, 2050.0)
    out["first_times_s"] = time.perf_counter() - t
    t = time.perf_counter()
    exposure_times(jd, 341.7625, 18.6083, 34.21, -108.39, 2050.0)
    out["second_times_s"] = time.perf_counter() - t
    return out


# ----------------------------------------------------------------------------- parent
# The parent never imports varstar (nor numpy, pandas): a child's ru_maxrss starts
# from its parent's peak at fork, so a small parent keeps the children's figures honest.
#: The ingest command run in other ways (``--threads``): label -> (what follows the interpreter, extra environment).
#: "dispatch.py" calls the command's function without varstar.cli.main (so without any limit main may set),
#: "limited.py" does the same inside varstar.threads.limit_blas_threads().
THREAD_VARIANTS = {
    "as shipped": (["-m", "varstar.cli"], {}),
    "no thread limit": (["{folder}/dispatch.py"], {}),
    "OPENBLAS_NUM_THREADS=1": (["-m", "varstar.cli"], {"OPENBLAS_NUM_THREADS": "1"}),
    "threadpoolctl limit": (["{folder}/limited.py"], {}),
}
DISPATCH = ("import sys\nfrom varstar.cli import build_parser\nargs = build_parser().parse_args(sys.argv[1:])\n"
            "sys.exit(int(args.func(args) or 0))\n")
LIMITED = ("import sys\nfrom varstar.threads import limit_blas_threads\nfrom varstar.cli import build_parser\n"
           "args = build_parser().parse_args(sys.argv[1:])\nwith limit_blas_threads():\n    rc = int(args.func(args) or 0)\n"
           "sys.exit(rc)\n")


def _cli_ingest(folder: Path, k: int, runner: list[str] | None = None, env: dict[str, str] | None = None,
                tag: str = "") -> tuple[float, float]:
    """Wall time and peak RSS of `python -m varstar.cli ingest` (or ``runner``) in a child process."""
    arch = folder / f"cli-{k}{tag}.h5"
    subprocess.run([sys.executable, "-m", "varstar.cli", "init", str(arch), str(folder / "target.toml")],
                   env=_env(), check=True, capture_output=True)
    runner = runner or ["-m", "varstar.cli"]
    cmd = [sys.executable, *[r.format(folder=folder) for r in runner], "ingest", str(arch), str(folder / "night.csv"), "--json"]
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, env={**_env(), **(env or {})}, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t
    proc.returncode = os.waitstatus_to_exitcode(status)
    err = proc.stderr.read().decode() if proc.stderr else ""
    if proc.stderr:
        proc.stderr.close()
    if proc.returncode != 0:
        raise SystemExit(f"varstar ingest failed ({proc.returncode}): {err.strip()}")
    return wall, _maxrss_mb(usage)


def make_inputs(folder: Path, n_exposures: int, n_stars: int, seed: int) -> dict[str, float]:
    """Run in a child process: write target.toml and night.csv of one synthetic night."""
    from varstar.simulate import measurements_csv, synthetic_night

    t = time.perf_counter()
    toml, df = synthetic_night(n_exposures, n_stars, bands=("B", "V"), seed=seed)
    gen = time.perf_counter() - t
    (folder / "target.toml").write_text(toml, encoding="utf-8")
    (folder / "night.csv").write_text(measurements_csv(df), encoding="utf-8")
    return {"rows": len(df), "csv_mb": (folder / "night.csv").stat().st_size / 1e6, "generate_s": gen}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--exposures", type=int, default=2000, help="exposures per band")
    ap.add_argument("--stars", type=int, default=30)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--no-tracemalloc", action="store_true", help="skip the (slow) tracemalloc pass")
    ap.add_argument("--threads", action="store_true", help="also compare BLAS thread limits (see the module notes)")
    ap.add_argument("--worker", type=Path, help=argparse.SUPPRESS)
    ap.add_argument("--probe", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--make-inputs", type=Path, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)

    if args.make_inputs is not None:
        sys.stdout.write(json.dumps(make_inputs(args.make_inputs, args.exposures, args.stars, args.seed)) + "\n")
        return 0
    if args.worker is not None:
        sys.stdout.write(json.dumps(worker(args.worker, trace=not args.no_tracemalloc, threads=args.threads)) + "\n")
        return 0
    if args.probe:
        sys.stdout.write(json.dumps(probe()) + "\n")
        return 0

    me = [sys.executable, str(Path(__file__).resolve())]
    with tempfile.TemporaryDirectory(prefix="varstar-bench-") as tmp:
        folder = Path(tmp)
        sizes = ["--exposures", str(args.exposures), "--stars", str(args.stars), "--seed", str(args.seed)]
        proc = subprocess.run(me + sizes + ["--make-inputs", str(folder)], env=_env(), capture_output=True, text=True)
        if proc.returncode != 0:
            sys.stderr.write(proc.stderr)
            return proc.returncode
        info = json.loads(proc.stdout.strip().splitlines()[-1])
        (folder / "dispatch.py").write_text(DISPATCH, encoding="utf-8")
        (folder / "limited.py").write_text(LIMITED, encoding="utf-8")
        runs, probes, cli = [], [], []
        by_threads: dict[str, list[float]] = {label: [] for label in THREAD_VARIANTS}
        for k in range(args.repeats):
            if args.threads:
                for j, (label, (runner, env)) in enumerate(THREAD_VARIANTS.items()):
                    by_threads[label].append(_cli_ingest(folder, k, runner, env, tag=f"-t{j}")[0])
            for extra, sink in (
                (["--worker", str(folder)] + (["--no-tracemalloc"] if args.no_tracemalloc else [])
                 + (["--threads"] if args.threads else []), runs),
                (["--probe"], probes),
            ):
                proc = subprocess.run(me + extra, env=_env(), capture_output=True, text=True)
                if proc.returncode != 0:
                    sys.stderr.write(proc.stderr)
                    return proc.returncode
                sink.append(json.loads(proc.stdout.strip().splitlines()[-1]))
            cli.append(_cli_ingest(folder, k))

    def med(key: str, source: list[dict[str, float]] = runs) -> float:
        vals = [r[key] for r in source if key in r]
        return statistics.median(vals) if vals else float("nan")

    cli_wall = statistics.median(w for w, _ in cli)
    cli_rss = statistics.median(m for _, m in cli)
    r0 = runs[0]
    print(
        f"varstar ingest benchmark: one synthetic night, {args.exposures} exposures x 2 bands x {args.stars} stars "
        f"= {info['rows']:,} rows ({info['csv_mb']:.1f} MB CSV, seed {args.seed}); "
        f"{int(r0['n_exposures'])} exposures reduced, archive {r0['archive_mb']:.1f} MB"
    )
    print(f"median of {args.repeats} run(s), each in a fresh process; Python {sys.version.split()[0]}, {sys.platform}\n")
    rows = [
        ("import varstar (numpy, pandas, h5py)", f"{med('import_s'):.2f} s", ""),
        ("ingest, cold (first call in the process)", f"{med('ingest_cold_s'):.2f} s", f"goal < {GOAL_WALL_S:g} s"),
        ("  one-time: import scipy.stats", f"{med('scipy_import_s', probes):.2f} s", "(separate process)"),
        ("  one-time: import astropy", f"{med('astropy_import_s', probes):.2f} s", "(separate process)"),
        ("  one-time: first BJD_TDB call (ephemeris set-up)", f"{med('first_times_s', probes):.2f} s", f"2nd call {med('second_times_s', probes):.3f} s"),
        ("ingest, warm (second call)", f"{med('ingest_warm_s'):.2f} s", ""),
        ("  read file", f"{med('read_s'):.3f} s", ""),
        ("  parse & validate", f"{med('parse_s'):.3f} s", ""),
        ("  night reduction (reduce_night)", f"{med('reduce_s'):.3f} s", ""),
        ("    of which times (BJD_TDB, HJD, airmass)", f"{med('times_s'):.3f} s", ""),
        ("    of which ensemble, vetting, report", f"{med('reduce_s') - med('times_s'):.3f} s", "(difference)"),
        ("  archive write (lock, append, journal commit)", f"{med('write_s'):.3f} s", "(remainder)"),
        ("whole command 'varstar ingest' (child process)", f"{cli_wall:.2f} s", "incl. interpreter start"),
        ("peak RSS, ingest process (VmHWM)", f"{med('rss_peak_mb'):.0f} MB", f"goal < {GOAL_RSS_MB:g} MB"),
        ("  of which after imports alone", f"{med('rss_after_import_mb'):.0f} MB", ""),
        ("peak RSS, 'varstar ingest' process (ru_maxrss)", f"{cli_rss:.0f} MB", ""),
        ("peak Python allocations (tracemalloc)", f"{med('tracemalloc_peak_mb'):.0f} MB", "numpy included, HDF5 not"),
    ]
    w = max(len(r[0]) for r in rows)
    for name, val, note in rows:
        print(f"{name:<{w}}  {val:>9}  {note}")
    cold = med("ingest_cold_s")
    print(
        f"\ncold ingest {'meets' if cold < GOAL_WALL_S else 'MISSES'} the {GOAL_WALL_S:g} s goal; "
        f"peak RSS {'meets' if med('rss_peak_mb') < GOAL_RSS_MB else 'MISSES'} the {GOAL_RSS_MB:g} MB goal"
    )
    print("runs (cold ingest s): " + ", ".join(f"{r['ingest_cold_s']:.2f}" for r in runs))
    if args.threads:
        base = min(by_threads["no thread limit"])
        print(f"\nBLAS threads (the machine has {os.cpu_count()} cores; BLAS starts "
              f"{med('blas_threads_default'):.0f} threads by default): whole 'varstar ingest', best and median of {args.repeats}")
        for label, walls in by_threads.items():
            print(f"  {label:28s} best {min(walls):6.2f} s  median {statistics.median(walls):6.2f} s  "
                  f"= {min(walls) / base:.2f} x no limit")
        print(f"  warm reduce_night: no limit {med('reduce_unlimited_s'):.3f} s, threadpoolctl limit {med('reduce_limited_s'):.3f} s "
              f"(= {med('reduce_limited_s') / med('reduce_unlimited_s'):.2f} x)")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark: one archive filled with ten years of nights, ingest and read times as it grows.

The scale of the goal: 3,650 nights, each 200 exposures in each of B and V of a
field of 12 stars (the target, ten comparison stars and a check star), about
4,800 measurement rows a night, 17.5 million in ten years.  Every night is
invented by :func:`varstar.simulate.synthetic_night` (its own seed; the same star
field every night; a field at declination +75 deg so that it is up all night,
every night of the year, observed 20:00-03:00 local mean time, so each night has
its own evening-date label).

How the archive is filled (stated plainly, because it is not 3,650 calls of
``ingest``):

* Between checkpoints, each night is reduced for real by
  :func:`varstar.workflows.reduce.reduce_night` from its own measurement table (generated,
  written as CSV text and parsed by :func:`varstar.measurements.parse_measurements`,
  as ingest does), in a worker process, and written by the main process with
  :meth:`varstar.archive.ArchiveWriter.append_night` in its own change
  -- the same function and the same one-transaction-per-night that ``ingest``
  uses.  What this skips of ``ingest``: reading the file from disk, its SHA-256
  (the source's ``sha256`` column gets a digest of the night's CSV text instead),
  and the duplicate checks that read the archive before the transaction.
  ``--reuse N`` cycles N reductions (times shifted by whole days, labels, frame
  names and sources renamed) for a quicker, less faithful run.
* At each checkpoint (0, 1, 2, 5, 10 years, or what ``--years`` allows) the next
  night is written to a CSV file and ingested with the real
  :func:`varstar.workflows.night.ingest`, timed in this (warm) process, and at the last
  checkpoint also as the command ``varstar ingest`` in a fresh process.

Figures per checkpoint: the ingest's wall time, split into the reduction
(``reduce_night``), the commit (new end, journal, flushes, writing the pages in)
and the rest (reading and parsing the file, the archive reads ingest makes
before its transaction, and the HDF5 appends into the in-memory overlay); the
journal's size; the wall time of :meth:`varstar.archive.Archive.lightcurve` for
the whole light curve (every band with all 24 columns, V alone, and every band with
only the columns the period and timing analyses read, ``ANALYSIS_COLUMNS``); the archive's size against the
measurements' size as float64 (the long table as an observer hands it over:
``jd, band, star, mag, mag_err, airmass, exptime, flag, frame`` = 9 values a
row, 72 bytes) and against the measured values alone (``jd, mag, mag_err``, 24
bytes a row); and, for comparison, what the previous commit mechanism paid
first: copying the whole archive and flushing the copy.

Goals (from the issue): ingest < 1 s at any archive size; the ten-year light
curve read < 1 s; archive size within 2x of the raw measurements as float64.
This is a script that prints figures, never a test.

Usage::

    python benchmarks/bench_archive_years.py [--years 10] [--nights-per-year 365] [--reuse 0] [--seed 0]
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import hashlib
import multiprocessing as mp
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

N_EXPOSURES = 200  # per band
N_STARS = 12
DEC_DEG = 75.0  # circumpolar at the simulator's site (latitude 34.2 deg): up all night, all year
LONGITUDE_DEG = -108.39  # the simulator's default site
FIRST_DAY = 2461300  # integer JD of the first night's local noon, less the longitude offset
ROW_BYTES_ALL = 9 * 8  # jd, band, star, mag, mag_err, airmass, exptime, flag, frame
ROW_BYTES_VALUES = 3 * 8  # jd, mag, mag_err


def night_start_jd(i: int) -> float:
    """JD(UTC) of 20:00 local mean time on the evening of night ``i``."""
    # night_label: the label changes where jd + longitude/360 is an integer (local noon).
    return FIRST_DAY + i - LONGITUDE_DEG / 360.0 + 8.0 / 24.0


def night_csv(i: int, seed: int) -> tuple[str, str]:
    """(target TOML, measurement CSV text) of night ``i``."""
    import numpy as np

    from varstar.simulate import measurements_csv, synthetic_night

    toml, df = synthetic_night(
        N_EXPOSURES, N_STARS, seed=np.random.default_rng([seed, abs(i), i < 0]), start_jd=night_start_jd(i), centre_on_transit=False,
        dec_deg=DEC_DEG, longitude_deg=LONGITUDE_DEG, field_seed=seed,
    )
    return toml, measurements_csv(df)


# ----------------------------------------------------------------------------- workers
_WORKER: dict = {}


def _init_worker(target_path: str, seed: int) -> None:
    from varstar.target import read_target

    _WORKER["target"] = read_target(Path(target_path))
    _WORKER["seed"] = seed


def reduce_one(i: int):
    """Reduce night ``i`` in a worker: (i, NightReduction, sha256 of its CSV text, number of rows)."""
    from varstar.measurements import parse_measurements
    from varstar.workflows.reduce import reduce_night

    _, text = night_csv(i, _WORKER["seed"])
    name = f"night-{i:05d}.csv"
    table = parse_measurements(text.encode(), name, _WORKER["target"].star_ids)
    return i, reduce_night(_WORKER["target"], table), hashlib.sha256(text.encode()).hexdigest(), len(table)


def shifted(red, i0: int, i: int):
    """A reduction of night ``i0`` moved to night ``i`` (for ``--reuse``): whole days, new names."""
    import numpy as np

    from varstar.timescale import night_label

    d = float(i - i0)
    label = str(night_label(np.array([night_start_jd(i) + 0.01]), LONGITUDE_DEG)[0])
    e = red.exposures.copy()
    for c in ("jd_utc", "bjd_tdb", "hjd_utc"):
        e[c] = e[c] + d
    e["frame"] = [label.replace("-", "") + f[f.index("-"):] if "-" in f else f for f in e["frame"]]
    p = red.points.copy()
    p["bjd_tdb"] = p["bjd_tdb"] + d
    r = red.raw.copy()
    r["source"] = f"night-{i:05d}.csv"
    rep = dict(red.report, night=label, bjd_start=red.report["bjd_start"] + d, bjd_end=red.report["bjd_end"] + d)
    return dataclasses.replace(red, label=label, exposures=e, points=p, raw=r, report=rep)


# ----------------------------------------------------------------------------- timing hooks
class CommitTimer:
    """Times the transaction's commit and records the journal's size (wraps module functions)."""

    def __init__(self) -> None:
        import varstar.archive  # noqa: F401  (loads the modules wrapped below)

        self.tx = sys.modules["varstar.archive.transaction"]
        self.jr = sys.modules["varstar.archive.journal"]
        self.commit_s = 0.0
        self.journal_bytes = 0
        self.tail_bytes = 0
        self._commit, self._write = self.tx._commit, self.jr.write_journal

    def __enter__(self):
        def commit(*args, **kwargs):
            t = time.perf_counter()
            try:
                return self._commit(*args, **kwargs)
            finally:
                self.commit_s += time.perf_counter() - t

        def write(jpath, j):
            self.journal_bytes += j.n_bytes
            self.tail_bytes += max(j.new_len - j.old_len, 0)
            return self._write(jpath, j)

        self.tx._commit, self.jr.write_journal = commit, write
        return self

    def __exit__(self, *exc) -> None:
        self.tx._commit, self.jr.write_journal = self._commit, self._write


def time_ingest(archive: Path, csv: Path) -> dict[str, float]:
    """A real ingest, timed, with its reduction and its commit apart."""
    from varstar import night

    real_reduce = night.reduce_night
    spent = {"reduce_s": 0.0}

    def reduce(*args, **kwargs):
        t = time.perf_counter()
        try:
            return real_reduce(*args, **kwargs)
        finally:
            spent["reduce_s"] += time.perf_counter() - t

    night.reduce_night = reduce
    try:
        with CommitTimer() as ct:
            t = time.perf_counter()
            night.ingest(archive, [csv])
            wall = time.perf_counter() - t
    finally:
        night.reduce_night = real_reduce
    return {"ingest_s": wall, "reduce_s": spent["reduce_s"], "commit_s": ct.commit_s,
            "journal_kb": ct.journal_bytes / 1024, "tail_kb": ct.tail_bytes / 1024}


def time_lightcurve(archive: Path) -> dict[str, float]:
    from varstar.archive import ArchiveStore

    arch = ArchiveStore(archive)
    out = {}
    from varstar.workflows.periods import ANALYSIS_COLUMNS

    for key, kw in (("lc_all_s", {}), ("lc_v_s", {"band": "V"}), ("lc_core_s", {"columns": ANALYSIS_COLUMNS})):
        times = []
        for _ in range(2):
            t = time.perf_counter()
            lc = arch.lightcurve(**kw)
            times.append(time.perf_counter() - t)
        out[key] = min(times)
        out[key.replace("_s", "_rows")] = len(lc)
    return out


def time_copy(archive: Path, folder: Path) -> float:
    """What the previous mechanism paid before any change: copy the archive and flush the copy."""
    tmp = folder / ".copy.tmp"
    t = time.perf_counter()
    shutil.copyfile(archive, tmp)
    fd = os.open(tmp, os.O_RDONLY)
    os.fsync(fd)
    os.close(fd)
    dt = time.perf_counter() - t
    tmp.unlink()
    return dt


def cli_ingest(archive: Path, csv: Path) -> float:
    env = dict(os.environ, PYTHONPATH=str(REPO) + (os.pathsep + os.environ["PYTHONPATH"] if os.environ.get("PYTHONPATH") else ""))
    t = time.perf_counter()
    proc = subprocess.run([sys.executable, "-m", "varstar.cli", "ingest", str(archive), str(csv), "--json"],
                          env=env, capture_output=True, text=True, check=False)
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        raise SystemExit(f"varstar ingest failed: {proc.stderr.strip()}")
    return wall


# ----------------------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--years", type=float, default=10.0, help="years of nights to fill (default 10)")
    ap.add_argument("--nights-per-year", type=int, default=365)
    ap.add_argument("--reuse", type=int, default=0, help="cycle this many real reductions instead of reducing every night")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--workers", type=int, default=max(1, (os.cpu_count() or 2) - 1))
    ap.add_argument("--keep", type=Path, help="build the archive in this folder and keep it")
    args = ap.parse_args(argv)

    import h5py

    import varstar
    from varstar.archive import ArchiveStore

    total = round(args.years * args.nights_per_year)
    marks = sorted({0, total} | {int(y * args.nights_per_year) for y in (1, 2, 5, 10) if y * args.nights_per_year <= total})
    with contextlib.ExitStack() as stack:
        if args.keep:
            folder = args.keep
            folder.mkdir(parents=True, exist_ok=True)
        else:
            folder = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="varstar-years-")))
        toml, _ = night_csv(0, args.seed)
        target_path = folder / "target.toml"
        target_path.write_text(toml, encoding="utf-8")
        archive = folder / "years.h5"
        if archive.exists():
            raise SystemExit(f"{archive} exists; give an empty --keep folder")
        varstar.create_archive(archive, varstar.read_target(target_path))

        # Warm up this process (astropy imports, time-scale set-up) on a scratch archive,
        # as a long-running session would be; the CLI figure at the end is the cold one.
        scratch = folder / "warmup.h5"
        varstar.create_archive(scratch, varstar.read_target(target_path))
        _, text = night_csv(-400, args.seed)  # a night outside the series
        (folder / "warmup.csv").write_text(text, encoding="utf-8")
        varstar.ingest(scratch, [folder / "warmup.csv"])

        rows_total = 0
        pool = stack.enter_context(mp.get_context("fork").Pool(args.workers, _init_worker, (str(target_path), args.seed)))
        reuse: list = []
        results = []
        i = 0
        t_fill = time.perf_counter()
        write_times: list[float] = []
        for mark in marks:
            # ---- fill up to the checkpoint, one transaction per night
            todo = range(i, mark)
            if args.reuse:
                need = list(range(len(reuse), args.reuse))  # reuse[j] is the reduction of night j
                for _, red, sha, n in pool.imap(reduce_one, need):
                    reuse.append((red, sha, n))
                source = ((k, *((shifted(reuse[k % args.reuse][0], k % args.reuse, k),) + reuse[k % args.reuse][1:])) for k in todo)
            else:
                source = pool.imap(reduce_one, todo, chunksize=4)
            for k, red, sha, n in source:
                sha = hashlib.sha256(f"{sha}-{k}".encode()).hexdigest() if args.reuse else sha
                t = time.perf_counter()
                with ArchiveStore(archive).writing(now="2036-01-01T00:00:00Z") as w:
                    w.append_night(red, {s: sha for s in red.raw["source"].unique()})
                write_times.append(time.perf_counter() - t)
                rows_total += n
                if (k + 1) % 100 == 0:
                    el = time.perf_counter() - t_fill
                    print(f"  ... {k + 1} nights, {archive.stat().st_size / 1e6:.0f} MB, {el / 60:.1f} min, "
                          f"median write {1e3 * statistics.median(write_times[-100:]):.0f} ms", file=sys.stderr, flush=True)
            i = mark
            # ---- checkpoint: real ingests of the next two nights, light curve, size
            figs = []
            for _ in range(2):
                _, text = night_csv(i, args.seed)
                csv = folder / f"night-{i:05d}.csv"
                csv.write_text(text, encoding="utf-8")
                rows_total += text.count("\n") - 1
                figs.append(time_ingest(archive, csv))
                csv.unlink()
                i += 1
            row = {k: statistics.median(f[k] for f in figs) for k in figs[0]}
            row["nights"] = i
            row.update(time_lightcurve(archive))
            row["size_mb"] = archive.stat().st_size / 1e6
            row["rows"] = rows_total
            row["copy_s"] = time_copy(archive, folder)
            with h5py.File(archive, "r") as fh:
                row["free_mb"] = fh.id.get_freespace() / 1e6
            results.append(row)
            print(f"checkpoint {i} nights: {row}, load {os.getloadavg()[0]:.1f}", file=sys.stderr, flush=True)
        cli_s = None
        _, text = night_csv(i, args.seed)
        csv = folder / f"night-{i:05d}.csv"
        csv.write_text(text, encoding="utf-8")
        cli_s = cli_ingest(archive, csv)
        fill_min = (time.perf_counter() - t_fill) / 60

    print(f"varstar archive benchmark: {total} nights filled ({args.years:g} years x {args.nights_per_year}), "
          f"{N_EXPOSURES} exposures x 2 bands x {N_STARS} stars a night"
          f"{f', {args.reuse} reductions cycled' if args.reuse else ', every night reduced'}; "
          f"built in {fill_min:.1f} min; Python {sys.version.split()[0]}, h5py {h5py.__version__}, HDF5 {h5py.version.hdf5_version}")
    print("at each checkpoint: median of 2 real ingests (warm process); light curve = best of 2 reads; "
          f"load average at the end {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs (other work inflates the times)\n")
    head = ("nights", "meas. rows", "archive MB", "x raw f8 (72 B/row)", "x values f8 (24 B/row)", "free MB",
            "ingest s", "reduce s", "rest s", "commit s", "journal KB", "new end KB", "copy-all s",
            "light curve s (rows)", "V only s", "analysis columns s")
    lines = []
    for r in results:
        raw_all = r["rows"] * ROW_BYTES_ALL / 1e6
        raw_val = r["rows"] * ROW_BYTES_VALUES / 1e6
        body = r["ingest_s"] - r["reduce_s"] - r["commit_s"]
        lines.append((
            f"{r['nights']}", f"{r['rows']:,}", f"{r['size_mb']:.1f}", f"{r['size_mb'] / raw_all:.2f}",
            f"{r['size_mb'] / raw_val:.2f}", f"{r['free_mb']:.1f}", f"{r['ingest_s']:.2f}", f"{r['reduce_s']:.2f}",
            f"{body:.2f}", f"{r['commit_s']:.3f}", f"{r['journal_kb']:.0f}", f"{r['tail_kb']:.0f}",
            f"{r['copy_s']:.2f}", f"{r['lc_all_s']:.2f} ({r['lc_all_rows']:,})", f"{r['lc_v_s']:.2f}",
            f"{r['lc_core_s']:.2f}",
        ))
    widths = [max(len(h), *(len(x[k]) for x in lines)) for k, h in enumerate(head)]
    print("  ".join(h.rjust(w) for h, w in zip(head, widths)))
    for x in lines:
        print("  ".join(v.rjust(w) for v, w in zip(x, widths)))
    last = results[-1]
    print(f"\nwhole command 'varstar ingest' at {last['nights']} nights (fresh process, cold imports): {cli_s:.2f} s")
    print(f"writes between checkpoints: median {1e3 * statistics.median(write_times):.0f} ms a night "
          f"(one transaction each), 95th percentile {1e3 * sorted(write_times)[int(0.95 * len(write_times))]:.0f} ms"
          if write_times else "")
    worst_ingest = max(r["ingest_s"] for r in results)
    print(f"goals: ingest < 1 s: {'met' if worst_ingest < 1 else 'MISSED'} (worst {worst_ingest:.2f} s); "
          f"light curve < 1 s: all 24 columns {'met' if last['lc_all_s'] < 1 else 'MISSED'} ({last['lc_all_s']:.2f} s), "
          f"the columns an analysis reads {'met' if last['lc_core_s'] < 1 else 'MISSED'} ({last['lc_core_s']:.2f} s); "
          f"size within 2x of raw f8: {last['size_mb'] / (last['rows'] * ROW_BYTES_ALL / 1e6):.2f}x of 72 B/row, "
          f"{last['size_mb'] / (last['rows'] * ROW_BYTES_VALUES / 1e6):.2f}x of 24 B/row")
    return 0


if __name__ == "__main__":
    sys.exit(main())

"""Benchmark: measure a night of FITS frames with ``varstar.photometry.measure_frames``.

Outside the timed part, an invented night is written to a temporary folder
(fixed seed, two processes): by default 300 frames of 2048 x 2048 float32
pixels, 30 stars each (a TAN WCS, Gaussian stars of FWHM 3.2-4.0 px drifting a
few pixels through the night, sky, photon and read noise) and the target
description.  Then, in the same run:

* the plain disk read: every file read whole, in this process, as bytes (what
  reading the frames costs at the least; the files were just written, so both
  this and the measurement read them from the operating system's cache);
* the measurement: a fresh Python process reads the target description and
  calls ``measure_frames`` on the folder's frames (workers = cores unless
  ``--workers``); its wall time is that call's, from its start (lazy imports of
  astropy and photutils, worker start-up) to the table; the peak resident
  memory of that process and its workers together is sampled from ``/proc``
  every 20 ms (Linux; elsewhere the largest single process from ``wait4``).

Goals: under 30 s wall on a 2-core machine, under 1 GB peak memory.  A script
that prints figures, never a test.

Usage::

    python benchmarks/bench_measure.py [--frames 300] [--size 2048] [--stars 30] [--workers N] [--keep DIR] [--seed 0]
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import threading
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
GOAL_WALL_S = 30.0
GOAL_RSS_MB = 1024.0
FIELD_RA, FIELD_DEC, SCALE_DEG = 95.2, 41.7, 1.1 / 3600.0
GAIN, READ_NOISE, SKY = 1.5, 9.0, 500.0


# --------------------------------------------------------------------------- the invented night


def _wcs_cards(size: int) -> dict:
    return {"CTYPE1": "RA---TAN", "CTYPE2": "DEC--TAN", "CRVAL1": FIELD_RA, "CRVAL2": FIELD_DEC,
            "CRPIX1": (size + 1) / 2.0, "CRPIX2": (size + 1) / 2.0, "CD1_1": -SCALE_DEG, "CD1_2": 0.0,
            "CD2_1": 0.0, "CD2_2": SCALE_DEG, "RADESYS": "ICRS"}


def _field(size: int, n_stars: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.uniform(60, size - 61, n_stars)
    y = rng.uniform(60, size - 61, n_stars)
    flux = 10 ** rng.uniform(3.3, 5.5, n_stars)
    return x, y, flux


def _write_frame(args: tuple) -> None:
    """One frame (run in a pool; each frame seeds its own generator)."""
    from astropy.io import fits
    from scipy.special import erf

    folder, k, size, n_stars, seed = args
    x, y, flux = _field(size, n_stars, seed)
    rng = np.random.default_rng([seed, k])
    drift = (2.0 * math.sin(k / 40.0), 1.5 * math.cos(k / 55.0))
    fwhm = 3.6 + 0.4 * math.sin(k / 25.0)
    img = rng.standard_normal((size, size), dtype=np.float32)
    img *= math.sqrt(SKY * GAIN + READ_NOISE**2) / GAIN
    img += SKY
    s = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0))) * math.sqrt(2.0)
    for xs, ys, f in zip(x + drift[0], y + drift[1], flux):
        x0, y0 = int(xs) - 15, int(ys) - 15
        ex = np.arange(x0, x0 + 32) - 0.5
        ey = np.arange(y0, y0 + 32) - 0.5
        star = f * np.outer(np.diff(0.5 * erf((ey - ys) / s)), np.diff(0.5 * erf((ex - xs) / s)))
        star += rng.standard_normal(star.shape) * np.sqrt(star / GAIN)  # the star's photon noise (ADU)
        img[y0:y0 + 31, x0:x0 + 31] += star[:31, :31].astype(np.float32)
    start = 2460300.5 + 0.8 + k * 70.0 / 86400.0
    from astropy.time import Time

    hdu = fits.PrimaryHDU(img)
    hdu.header.update({"DATE-OBS": Time(start, format="jd", scale="utc").isot, "EXPTIME": 60.0, "FILTER": "V",
                       "GAIN": GAIN, "RDNOISE": READ_NOISE, "AIRMASS": 1.2 + 0.001 * k, **_wcs_cards(size)})
    hdu.writeto(Path(folder) / f"night_{k:04d}.fits", overwrite=True)


def _target_text(size: int, n_stars: int, seed: int) -> str:
    from astropy.wcs import WCS

    x, y, _ = _field(size, n_stars, seed)
    ra, dec = WCS(_wcs_cards(size)).all_pix2world(x, y, 0)
    lines = ["[target]", 'name = "Bench field"', f"ra = {float(ra[0])!r}", f"dec = {float(dec[0])!r}", "",
             "[site]", "latitude = 40.0", "longitude = -3.0", "elevation = 700.0", ""]
    for k in range(n_stars):
        role = "target" if k == 0 else "check" if k == 1 else "comparison"
        sid = "V1" if k == 0 else f"S{k}"
        lines += ["[[stars]]", f'id = "{sid}"', f'role = "{role}"', f"ra = {float(ra[k])!r}", f"dec = {float(dec[k])!r}"]
        if role == "comparison":
            lines.append(f"V = {12.0 + 0.05 * k!r}")
        lines.append("")
    return "\n".join(lines)


def make_night(folder: Path, n_frames: int, size: int, n_stars: int, seed: int) -> None:
    (folder / "target.toml").write_text(_target_text(size, n_stars, seed), encoding="utf-8")
    frames = folder / "frames"
    frames.mkdir(exist_ok=True)
    with ProcessPoolExecutor(max_workers=2) as pool:
        list(pool.map(_write_frame, [(str(frames), k, size, n_stars, seed) for k in range(n_frames)], chunksize=4))


# --------------------------------------------------------------------------- the measurement (child process)


def _child(folder: str, workers: int | None) -> None:
    from varstar.photometry import find_frames, measure_frames
    from varstar.target import read_target

    target = read_target(Path(folder) / "target.toml")
    frames = find_frames([Path(folder) / "frames"])
    t0 = time.perf_counter()
    result = measure_frames(target, frames, workers=workers)
    wall = time.perf_counter() - t0
    tab = result.table
    print(json.dumps({"wall_s": wall, "rows": len(tab), "frames": result.n_measured, "refused": len(result.refused),
                      "flagged": int((tab["flag"] != 0).sum()), "fwhm_median": float(tab["fwhm_px"].median()),
                      "first_refusal": result.refused[0]["reason"] if result.refused else ""}))


def _tree_rss_mb(pid: int) -> float:
    """Resident memory (MB) of a process and all its descendants, from /proc (Linux)."""
    total = 0
    stack = [pid]
    while stack:
        p = stack.pop()
        try:
            with open(f"/proc/{p}/status") as fh:
                for line in fh:
                    if line.startswith("VmRSS:"):
                        total += int(line.split()[1])
                        break
            for task in os.listdir(f"/proc/{p}/task"):
                with open(f"/proc/{p}/task/{task}/children") as fh:
                    stack += [int(c) for c in fh.read().split()]
        except (FileNotFoundError, ProcessLookupError, PermissionError):
            continue
    return total / 1024.0


def measure_in_child(folder: Path, workers: int | None) -> tuple[dict, float]:
    cmd = [sys.executable, __file__, "--child", str(folder)] + ([f"--workers={workers}"] if workers else [])
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True, cwd=REPO)
    peak = 0.0
    done = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not done.is_set():
            peak = max(peak, _tree_rss_mb(proc.pid))
            time.sleep(0.02)

    sampler = threading.Thread(target=sample, daemon=True)
    if os.path.isdir("/proc"):
        sampler.start()
    out, _ = proc.communicate()
    done.set()
    if proc.returncode != 0:
        raise SystemExit(f"the measuring process failed (exit {proc.returncode})")
    return json.loads(out.strip().splitlines()[-1]), peak


def disk_read_s(folder: Path) -> tuple[float, int]:
    """Read every frame whole as bytes; (seconds, bytes)."""
    files = sorted((folder / "frames").glob("*.fits"))
    buf = bytearray(32 * 1024 * 1024)
    total = 0
    t0 = time.perf_counter()
    for f in files:
        with open(f, "rb", buffering=0) as fh:
            while True:
                n = fh.readinto(buf)
                if not n:
                    break
                total += n
    return time.perf_counter() - t0, total


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--frames", type=int, default=300)
    ap.add_argument("--size", type=int, default=2048)
    ap.add_argument("--stars", type=int, default=30)
    ap.add_argument("--workers", type=int, default=None)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--keep", type=Path, default=None, help="write (or reuse) the night in this folder and keep it")
    ap.add_argument("--child", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        _child(args.child, args.workers)
        return

    tmp = None
    if args.keep is not None:
        folder = args.keep
        folder.mkdir(parents=True, exist_ok=True)
    else:
        tmp = tempfile.TemporaryDirectory(prefix="varstar-bench-measure-")
        folder = Path(tmp.name)
    try:
        have = len(list((folder / "frames").glob("*.fits"))) if (folder / "frames").is_dir() else 0
        if have != args.frames:
            t0 = time.perf_counter()
            make_night(folder, args.frames, args.size, args.stars, args.seed)
            print(f"wrote {args.frames} frames of {args.size} x {args.size} float32, {args.stars} stars each, "
                  f"in {time.perf_counter() - t0:.1f} s (not timed below)")
        read_s, n_bytes = disk_read_s(folder)
        info, peak_mb = measure_in_child(folder, args.workers)
        wall = info["wall_s"]
        print(f"plain disk read of the frames: {read_s:.2f} s ({n_bytes / 1e9:.2f} GB, {n_bytes / 1e9 / read_s:.2f} GB/s; "
              "from the OS cache)")
        print(f"measure_frames: {wall:.2f} s wall for {info['frames']} frames ({info['frames'] / wall:.1f} frames/s), "
              f"{info['rows']} rows, {info['flagged']} flagged, {info['refused']} refused, median FWHM {info['fwhm_median']:.2f} px"
              f"  [goal < {GOAL_WALL_S:.0f} s]")
        if info["refused"]:
            print(f"  first refusal: {info['first_refusal']}")
        print(f"peak resident memory of the measuring process and its workers: {peak_mb:.0f} MB  [goal < {GOAL_RSS_MB:.0f} MB]")
        print(f"ratio of measure_frames to the plain disk read: {wall / read_s:.1f}x  (cores: {os.cpu_count()}, "
              f"workers: {args.workers or os.cpu_count()})")
    finally:
        if tmp is not None:
            tmp.cleanup()


if __name__ == "__main__":
    main()

"""Benchmark: the whole ``varstar period`` command on ten-year archives, against astropy and the floor.

Archives (invented, fixed seeds, built once and cached; ``--cache``): one V-band
target observed over ``--years`` years, nightly (about +-3.5 h, seasonal gaps
of a third of the year, 60% clear nights), ``N`` points in all for each of
``--sizes`` (default 50,000 and 200,000).  Each night is a
:func:`varstar.simulate.synthetic_night` of a 5-star field (target ``V1``, an
RR Lyrae-like pulsator of period 0.46173 d and 0.68 mag amplitude, three
comparison stars and a check star) in V only; the nights are written as one
measurement CSV per year and put in a new archive by one real
:func:`varstar.ingest` call (the ensemble reduction of every night, as
``varstar ingest`` does).  Building takes minutes per archive (ingest reduces
every night); later runs reuse the cache.

Timed, each as a whole fresh Python process, best of ``--repeats`` rounds (the
three processes alternate within a round so that the machine's load hits them
alike):

* ``command``: ``varstar period ARCHIVE --band V --min-period 0.1 --max-period 50 --no-store``;
* ``astropy``: a process that reads the same points from the archive with h5py
  into pandas and runs astropy's ``LombScargle(t, y, dy).autopower(method="fast",
  minimum_frequency=1/50, maximum_frequency=1/0.1, samples_per_peak=10)``, the
  issue's reference;
* ``floor``: a process that reads the points through :meth:`varstar.Archive.lightcurve`
  and runs varstar's periodogram alone (grid + :func:`varstar.period.gls.gls_power`),
  the least any period command can cost.

Printed: the times and the ratios command / astropy and command / floor (goals:
<= 1 and, moonshot, <= 2), the 200,000 / 50,000 ratio of the command (goal <= 3),
and a stage table of the command from ``cProfile`` (cumulative seconds of
imports, reading, periodogram, FAP, aliases, PDM, P or 2P, harmonic fits, ...;
rows nest, e.g. a lazy import inside a stage counts in both).

``--threads``: the command again with ``OPENBLAS_NUM_THREADS=1`` and with the
:func:`varstar.threads.limit_blas_threads` limit around ``varstar.cli.main``
(each in the same rounds as the default), with stage tables.

``--kernels``: the kernels alone on the 50,000-point series: varstar's fast
periodogram against astropy's ``fast`` (nterms=1) and ``fastchi2`` (nterms=3)
on the same grid (slow: astropy's fastchi2 takes about a minute), the peak of
the fast path against the direct sums on a fine window (goal 1e-7 relative; this
check also runs without the flag), PDM's binning against the textbook four-sum
form, and the phase sort of the P-or-2P test against ``numpy.argsort``.

This is a script that prints figures, never a test.

Usage::

    python benchmarks/bench_period.py [--sizes 50000,200000] [--repeats 3] [--threads] [--kernels]
                                      [--no-profile] [--cache DIR] [--years 10] [--seed 0]
"""

from __future__ import annotations

import argparse
import json
import os
import pstats
import shutil
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

LONGITUDE_DEG = -108.39  # the simulator's default site
DEC_DEG = 75.0  # circumpolar there: the field is up all night; the seasons are imposed below
FIRST_DAY = 2461300  # integer JD near the first night's local noon
N_STARS = 5  # target, three comparison stars, one check star
BUILDER = "v1"  # bump when the archive recipe changes (cache key)
PERIOD_ARGS = ["--band", "V", "--min-period", "0.1", "--max-period", "50", "--no-store"]
P_TRUE = 0.46173  # synthetic_night's default pulsator


# ----------------------------------------------------------------------------- archives
def night_plan(n_points: int, years: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Days (from FIRST_DAY) with observations and exposures per night (sum = n_points)."""
    rng = np.random.default_rng(seed)
    days = np.arange(int(365.25 * years))
    days = days[np.sin(2 * np.pi * days / 365.25) > -0.5]  # seasonal gap, a third of the year
    days = days[rng.random(days.size) < 0.6]  # weather
    per_night = rng.multinomial(n_points, np.full(days.size, 1.0 / days.size))
    keep = per_night > 0
    return days[keep], per_night[keep]


def build_archive(folder: Path, n_points: int, years: float, seed: int) -> Path:
    """Create ``folder/archive.h5`` (and the CSVs it was ingested from); return its path."""
    import pandas as pd

    import varstar
    from varstar.simulate import measurements_csv, synthetic_night

    folder.mkdir(parents=True, exist_ok=True)
    days, per_night = night_plan(n_points, years, seed)
    frames, toml = [], None
    for d, k in zip(days, per_night):
        toml, df = synthetic_night(
            int(k), N_STARS, bands=("V",), seed=np.random.default_rng([seed, int(d)]),
            start_jd=FIRST_DAY + int(d) - LONGITUDE_DEG / 360.0 + 8.0 / 24.0,  # 20:00 local mean time
            centre_on_transit=False, dec_deg=DEC_DEG, longitude_deg=LONGITUDE_DEG, field_seed=seed,
            missing_fraction=0.0, flag_fraction=0.0,
        )
        frames.append(df)
    (folder / "target.toml").write_text(toml, encoding="utf-8")
    table = pd.concat(frames, ignore_index=True)
    year = ((table["jd"] - FIRST_DAY) // 365.25).astype(int)
    files = []
    for y, g in table.groupby(year):
        p = folder / f"year{int(y):02d}.csv"
        p.write_text(measurements_csv(g), encoding="utf-8")
        files.append(p)
    archive = folder / "archive.h5"
    for stale in (archive, archive.with_name(archive.name + ".lock")):
        stale.unlink(missing_ok=True)
    varstar.create_archive(archive, varstar.read_target(folder / "target.toml"))
    varstar.ingest(archive, files)
    return archive


def cached_archive(cache: Path, n_points: int, years: float, seed: int) -> Path:
    folder = cache / f"{BUILDER}-n{n_points}-y{years:g}-s{seed}"
    done = folder / "done.json"
    if done.exists():
        return folder / "archive.h5"
    print(f"building the {n_points:,}-point archive in {folder} (minutes; cached for later runs) ...", flush=True)
    t0 = time.perf_counter()
    archive = build_archive(folder, n_points, years, seed)
    done.write_text(json.dumps({"n_points": n_points, "years": years, "seed": seed,
                                "build_s": time.perf_counter() - t0}), encoding="utf-8")
    print(f"  built in {time.perf_counter() - t0:.0f} s", flush=True)
    return archive



# ----------------------------------------------------------------------------- processes
ASTROPY_PROCESS = textwrap.dedent("""
    import json, sys
    import h5py
    import numpy as np
    import pandas as pd
    from astropy.timeseries import LombScargle

    with h5py.File(sys.argv[1], "r") as f:
        roles = list(f["stars"]["role"].asstr()[()])
        bands = list(f["bands"]["name"].asstr()[()])
        p = f["points"]
        keep = (p["star"][()] == roles.index("target")) & (p["band"][()] == bands.index("V")) & (p["quality"][()] == 0)
        lc = pd.DataFrame({c: p[c][()][keep] for c in ("bjd_tdb", "mag", "mag_err")}).sort_values("bjd_tdb")
    freq, power = LombScargle(lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy()).autopower(
        method="fast", minimum_frequency=1 / 50, maximum_frequency=1 / 0.1, samples_per_peak=10)
    print(json.dumps({"n_points": len(lc), "n_freq": int(freq.size), "period": float(1 / freq[np.argmax(power)])}))
""")

FLOOR_PROCESS = textwrap.dedent("""
    import json, sys
    import numpy as np
    import varstar
    from varstar.period.gls import gls_power
    from varstar.period.grid import frequency_grid

    lc = varstar.open_archive(sys.argv[1]).lightcurve("V", columns=["bjd_tdb", "mag", "mag_err"])
    t, y, dy = lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy()
    freq = frequency_grid(t, min_period=0.1, max_period=50)
    power = gls_power(t, y, dy, freq)
    print(json.dumps({"n_points": int(t.size), "n_freq": int(freq.size), "period": float(1 / freq[np.argmax(power)])}))
""")

# The command without cli.main's wrapping (whatever it does about threads), and inside the threadpoolctl limit.
DISPATCH = "import sys\nfrom varstar.cli import build_parser\nargs = build_parser().parse_args(sys.argv[1:])\nsys.exit(int(args.func(args) or 0))\n"
LIMITED = ("import sys\nfrom varstar.threads import limit_blas_threads\nfrom varstar.cli import build_parser\n"
           "args = build_parser().parse_args(sys.argv[1:])\nwith limit_blas_threads():\n    rc = int(args.func(args) or 0)\nsys.exit(rc)\n")


def _env(extra: dict[str, str] | None = None) -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(REPO) + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env.update(extra or {})
    return env


def _varstar_script() -> list[str]:
    exe = shutil.which("varstar", path=str(Path(sys.executable).parent))
    return [exe] if exe else [sys.executable, "-m", "varstar.cli"]


def variants(archive: Path, scripts: Path, threads: bool) -> dict[str, tuple[list[str], dict[str, str]]]:
    """Label -> (argv, env) of each process timed on ``archive``."""
    cmd = ["period", str(archive), *PERIOD_ARGS]
    out = {
        "command": (_varstar_script() + cmd, _env()),
        "astropy": ([sys.executable, str(scripts / "astropy_process.py"), str(archive)], _env()),
        "floor": ([sys.executable, str(scripts / "floor_process.py"), str(archive)], _env()),
    }
    if threads:
        out["command, no thread limit"] = ([sys.executable, str(scripts / "dispatch.py"), *cmd], _env())
        out["command, OPENBLAS_NUM_THREADS=1"] = (_varstar_script() + cmd, _env({"OPENBLAS_NUM_THREADS": "1"}))
        out["command, threadpoolctl limit"] = ([sys.executable, str(scripts / "limited.py"), *cmd], _env())
    return out


def write_scripts(folder: Path) -> None:
    (folder / "astropy_process.py").write_text(ASTROPY_PROCESS, encoding="utf-8")
    (folder / "floor_process.py").write_text(FLOOR_PROCESS, encoding="utf-8")
    (folder / "dispatch.py").write_text(DISPATCH, encoding="utf-8")
    (folder / "limited.py").write_text(LIMITED, encoding="utf-8")


def run_once(argv: list[str], env: dict[str, str]) -> tuple[float, str]:
    t0 = time.perf_counter()
    res = subprocess.run(argv, env=env, capture_output=True, text=True, cwd=REPO)
    wall = time.perf_counter() - t0
    if res.returncode != 0:
        raise SystemExit(f"failed ({res.returncode}): {' '.join(argv)}\n{res.stderr[-3000:]}")
    return wall, res.stdout


def time_processes(procs: dict[str, tuple[list[str], dict[str, str]]], repeats: int) -> tuple[dict[str, float], dict[str, str]]:
    """Best wall time of each process over ``repeats`` rounds; the processes alternate within a round."""
    best = {k: float("inf") for k in procs}
    outputs: dict[str, str] = {}
    for _ in range(repeats):
        for label, (argv, env) in procs.items():
            wall, out = run_once(argv, env)
            best[label] = min(best[label], wall)
            outputs[label] = out
    return best, outputs


def _period_of(out: str) -> float:
    try:
        return float(json.loads(out.strip().splitlines()[-1])["period"])
    except (ValueError, KeyError, IndexError):
        pass
    for word in out.split():  # "V1: period 0.4617300 ± ..."
        try:
            return float(word)
        except ValueError:
            continue
    return float("nan")


# ----------------------------------------------------------------------------- stage table
#: (label, callee file suffix, callee functions or None for any, caller "file suffix[:function]" or None)
STAGES = (
    ("imports (all, also those inside the stages below)", "<frozen importlib._bootstrap>", ("_find_and_load",), None),
    ("reading the light curve", "varstar/archive/store.py", ("lightcurve",), None),
    ("analyse() in all", "varstar/period/analysis.py", ("analyse",), None),
    ("  input checks", "varstar/period/series.py", None, "varstar/period/analysis.py"),
    ("  frequency grid", "varstar/period/grid.py", ("frequency_grid",), "varstar/period/periodogram.py"),
    ("  periodogram", "varstar/period/gls.py", ("gls_power",), "varstar/period/periodogram.py"),
    ("  periodogram (multi-band)", "varstar/period/multiband.py", ("multiband_power",), "varstar/period/periodogram.py"),
    ("  false-alarm probability", "varstar/period/significance.py", None, "varstar/period/periodogram.py"),
    ("  aliases", "varstar/period/aliases.py", None, "varstar/period/analysis.py"),
    ("  aliases", "varstar/period/aliases.py", None, "varstar/period/rivals.py"),
    ("  PDM search", "varstar/period/pdm.py", ("pdm_search",), "varstar/period/analysis.py:_candidates"),
    ("  PDM theta at the period", "varstar/period/pdm.py", ("pdm_theta",), "varstar/period/analysis.py:_pdm_summary"),
    ("  PDM vs periodogram (phase neighbours)", "varstar/period/rivals.py", ("cv_z",), None),
    ("  P or 2P", "varstar/period/p_or_2p.py", ("choose_p_or_2p",), None),
    ("  harmonic fits (refine.* called by analysis)", "varstar/period/refine.py", None, "varstar/period/analysis.py"),
    ("  rival aliases (harmonic fits)", "varstar/period/rivals.py", ("check_rivals",), None),
    ("  eclipse template", "varstar/period/template.py", None, "varstar/period/analysis.py"),
    ("  nightly covariance", "varstar/period/nightly.py", None, "varstar/period/analysis.py"),
    ("  prewhitening", "varstar/period/prewhiten.py", ("prewhiten",), "varstar/period/analysis.py"),
    ("  joint fit of further frequencies", "varstar/period/sinusoids.py", None, "varstar/period/analysis.py"),
    ("  frequencies and modes in words", "varstar/period/modes.py", None, "varstar/period/analysis.py"),
    ("JSON record", "varstar/results.py", None, "varstar/workflows/periods.py"),
    ("plots", "varstar/plots.py", None, "varstar/cli.py"),
    ("storing in the archive", "varstar/archive/transaction.py", ("transaction",), "varstar/archive/store.py"),
)


def stage_table(prof: Path) -> list[tuple[str, float]]:
    st = pstats.Stats(str(prof)).stats  # (file, line, func) -> (cc, nc, tt, ct, callers)
    rows: dict[str, float] = {}
    for label, callee_file, funcs, caller_file in STAGES:
        total = 0.0
        for (file, _, func), (_, _, _, ct, callers) in st.items():
            if not file.replace(os.sep, "/").endswith(callee_file) or (funcs is not None and func not in funcs):
                continue
            if caller_file is None:
                total += ct
            else:
                c_file, _, c_func = caller_file.partition(":")
                total += sum(edge[3] for (cf, _, cfn), edge in callers.items()
                             if cf.replace(os.sep, "/").endswith(c_file) and c_func in ("", cfn))
        if total > 0:
            rows[label] = rows.get(label, 0.0) + total
    out = [("whole command under the profiler", float(pstats.Stats(str(prof)).total_tt))] + list(rows.items())
    inner = [v for k, v in rows.items() if k.startswith("  ")]
    if "analyse() in all" in rows:
        out.append(("  (rest of analyse)", rows["analyse() in all"] - sum(inner)))
    return out


def profile_command(argv_tail: list[str], env: dict[str, str], prof: Path, runner: Path | None = None) -> list[tuple[str, float]]:
    target = [str(runner)] if runner else ["-m", "varstar.cli"]
    subprocess.run([sys.executable, "-m", "cProfile", "-o", str(prof), *target, *argv_tail],
                   env=env, capture_output=True, text=True, cwd=REPO, check=True)
    return stage_table(prof)


def print_stage_tables(tables: dict[str, list[tuple[str, float]]]) -> None:
    labels: list[str] = []
    for rows in tables.values():
        labels += [lab for lab, _ in rows if lab not in labels]
    heads = list(tables)
    print(f"  {'stage (cumulative s, cProfile)':50s}" + "".join(f"{h:>24s}" for h in heads))
    for lab in labels:
        vals = [dict(tables[h]).get(lab) for h in heads]
        print(f"  {lab:50s}" + "".join(f"{v:24.3f}" if v is not None else f"{'-':>24s}" for v in vals))


# ----------------------------------------------------------------------------- checks and kernels
def parabola_peak(f: np.ndarray, p: np.ndarray) -> float:
    i = int(np.clip(np.argmax(p), 1, p.size - 2))
    a, b, c = p[i - 1], p[i], p[i + 1]
    return float(f[i] + 0.5 * (a - c) / (a - 2 * b + c) * (f[1] - f[0]))


def read_points(archive: Path) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    import varstar

    lc = varstar.open_archive(archive).lightcurve("V", columns=["bjd_tdb", "mag", "mag_err"])
    return lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy()


def peak_agreement(t, y, dy, nterms_list=(1, 3)) -> None:
    """Peak of the fast (NUFFT) periodogram against the direct sums on a fine window (goal 1e-7 relative)."""
    from varstar.period.gls import gls_power
    from varstar.period.grid import frequency_grid

    f = frequency_grid(t, min_period=0.1, max_period=50)
    df = f[1] - f[0]
    print(f"  {'nterms':>6} {'f_peak fast [c/d]':>19} {'f_peak exact [c/d]':>19} {'rel. diff':>10} {'goal':>6} {'|f - f_true| / (1/T)':>21}")
    for nterms in nterms_list:
        top = int(np.argmax(gls_power(t, y, dy, f, nterms=nterms, method="fast")))
        fine = f[top] + np.arange(-100, 101) * (df / 50.0)
        ff = parabola_peak(fine, gls_power(t, y, dy, fine, nterms=nterms, method="fast"))
        fe = parabola_peak(fine, gls_power(t, y, dy, fine, nterms=nterms, method="exact"))
        print(f"  {nterms:>6} {ff:>19.10f} {fe:>19.10f} {abs(ff / fe - 1):>10.1e} {'1e-7':>6} {abs(fe - 1 / P_TRUE) * np.ptp(t):>21.4f}")


def _pdm_textbook(t, y, dy, freq, n_bins=10, n_covers=2, chunk=2_000_000):
    """The previous binning (four sums per fine bin, a modulo per point), kept here as the reference."""
    w = 1.0 / dy**2
    yc = y - np.sum(w * y) / np.sum(w)
    wy, wy2 = w * yc, w * yc**2
    sigma2 = float(np.sum(wy2)) / (t.size - 1)
    tt = t - t.min()
    n_fine = n_bins * n_covers
    theta = np.empty(freq.size)
    k = max(1, chunk // t.size)
    for s in range(0, freq.size, k):
        fc = freq[s : s + k]
        ph = np.multiply.outer(fc, tt)
        ph -= np.floor(ph)
        idx = np.minimum((ph * n_fine).astype(np.intp), n_fine - 1)
        idx += (np.arange(fc.size) * n_fine)[:, None]
        idx = idx.ravel()
        size = fc.size * n_fine
        sums = [np.bincount(idx, minlength=size)] + [
            np.bincount(idx, weights=np.broadcast_to(a, (fc.size, t.size)).ravel(), minlength=size) for a in (w, wy, wy2)]
        sums = [a.reshape(fc.size, n_fine) for a in sums]
        sums = [a + sum(np.roll(a, -j, axis=1) for j in range(1, n_covers)) for a in sums]
        cnt, sw, swy, swy2 = sums
        ne = cnt > 0
        with np.errstate(invalid="ignore", divide="ignore"):
            ss = np.maximum(np.where(ne, swy2 - np.where(ne, swy**2 / sw, 0.0), 0.0), 0.0).sum(axis=1)
        dof = cnt.sum(axis=1) - ne.sum(axis=1)
        theta[s : s + k] = np.where(dof > 0, ss / dof / sigma2, np.nan)
    return theta


def best_of(fn, repeats: int):
    best, out = np.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def kernels(points: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]], repeats: int) -> None:
    from astropy.timeseries import LombScargle

    from varstar.period import p_or_2p, pdm
    from varstar.period.gls import gls_power
    from varstar.period.grid import frequency_grid

    n_small = min(points)
    t, y, dy = points[n_small]
    f = frequency_grid(t, min_period=0.1, max_period=50)
    print(f"\nkernels on the {t.size:,}-point series, {f.size:,} frequencies (0.1-50 d, 10 per peak width)")
    print(f"  {'nterms':>6} {'varstar fast [s]':>17} {'astropy method':>15} {'astropy [s]':>12} {'ratio':>7} {'max |dP|':>9}")
    for nterms, method in ((1, "fast"), (3, "fastchi2")):
        ours, p = best_of(lambda: gls_power(t, y, dy, f, nterms=nterms, method="fast"), repeats)
        ls = LombScargle(t, y, dy, fit_mean=True, center_data=True, nterms=nterms, normalization="standard")
        theirs, pa = best_of(lambda: ls.power(f, method=method), 1)
        print(f"  {nterms:>6} {ours:>17.3f} {method:>15} {theirs:>12.2f} {theirs / ours:>6.1f}x {np.max(np.abs(pa - p)):>9.1e}")
    rng = np.random.default_rng(1)
    pick = np.sort(rng.choice(f.size, 300, replace=False))
    for nterms in (1, 3):
        d = np.max(np.abs(gls_power(t, y, dy, f, nterms=nterms, method="fast")[pick]
                          - gls_power(t, y, dy, f[pick], nterms=nterms, method="exact")))
        print(f"  fast vs exact power on 300 grid frequencies, nterms={nterms}: max |dP| {d:.1e}")
    k = 8
    ys = y + np.random.default_rng(2).normal(0, 0.01, (k, t.size))
    batch, _ = best_of(lambda: gls_power(t, ys, dy, f, nterms=1, method="fast"), max(1, repeats - 1))
    single, _ = best_of(lambda: [gls_power(t, ys[i], dy, f, nterms=1, method="fast") for i in range(k)], 1)
    print(f"  batch of {k} series in one call {batch:.3f} s, {k} single calls {single:.3f} s")

    print("\n  PDM binning, 400 frequencies near the peak (n_bins 10, 2 covers)")
    print(f"  {'N':>8} {'textbook [s]':>13} {'ns/pt/f':>8} {'varstar [s]':>12} {'ns/pt/f':>8} {'ratio':>6} {'max rel diff':>13}")
    for n, (tn, yn, dyn) in sorted(points.items()):
        fw = 1 / P_TRUE + (np.arange(400) - 200) / (10 * np.ptp(tn))
        old, th0 = best_of(lambda: _pdm_textbook(tn, yn, dyn, fw), repeats)
        new, th1 = best_of(lambda: pdm.pdm_theta(tn, yn, dyn, fw), repeats)
        el = tn.size * fw.size / 1e9
        print(f"  {tn.size:>8,} {old:>13.3f} {old / el:>8.2f} {new:>12.3f} {new / el:>8.2f} {old / new:>5.1f}x "
              f"{np.nanmax(np.abs(th1 / th0 - 1)):>13.1e}")
    print("\n  phase order of the P-or-2P test (stable argsort of the phases)")
    for n, (tn, _, _) in sorted(points.items()):
        ph = (tn - tn[0]) / P_TRUE
        ph -= np.floor(ph)
        a, o1 = best_of(lambda: np.argsort(ph, kind="stable"), repeats * 3)
        b, o2 = best_of(lambda: p_or_2p._phase_order(ph), repeats * 3)
        print(f"  {tn.size:>8,} numpy.argsort {a * 1e3:7.2f} ms, radix + merge {b * 1e3:7.2f} ms ({a / b:.1f}x), "
              f"identical: {bool(np.array_equal(o1, o2))}")


# ----------------------------------------------------------------------------- main
def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="50000,200000", help="points per archive, comma-separated")
    ap.add_argument("--years", type=float, default=10.0)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--cache", type=Path, default=Path(tempfile.gettempdir()) / "varstar-bench-period")
    ap.add_argument("--threads", action="store_true", help="also time the command with BLAS limited to one thread")
    ap.add_argument("--kernels", action="store_true", help="also the kernel comparisons (about two minutes)")
    ap.add_argument("--no-profile", action="store_true", help="skip the cProfile stage tables")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s]
    start = time.perf_counter()

    archives = {n: cached_archive(args.cache, n, args.years, args.seed) for n in sizes}
    from varstar.threads import blas_thread_counts

    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, {os.cpu_count()} cores; BLAS threads by default: "
          f"{blas_thread_counts()}; OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}")
    points = {n: read_points(a) for n, a in archives.items()}
    for n, (t, _, _) in points.items():
        print(f"archive {archives[n]}: {t.size:,} V points over {np.ptp(t):.0f} d")

    results: dict[int, dict[str, float]] = {}
    with tempfile.TemporaryDirectory(prefix="varstar-bench-") as tmp:
        scripts = Path(tmp)
        write_scripts(scripts)
        for n, archive in archives.items():
            procs = variants(archive, scripts, args.threads)
            best, outs = time_processes(procs, args.repeats)
            results[n] = best
            print(f"\n{n:,} points: whole processes, best of {args.repeats} (wall s)")
            for label, s in best.items():
                extra = ""
                if label.startswith("command"):
                    extra = (f"   = {s / best['astropy']:.2f} x astropy (goal <= 1), {s / best['floor']:.2f} x floor "
                             f"(moonshot <= 2)")
                print(f"  {label:36s} {s:7.2f}{extra}   P = {_period_of(outs[label]):.7f} d")
            if not args.no_profile:
                tail = ["period", str(archive), *PERIOD_ARGS]
                tables = {"as shipped": profile_command(tail, _env(), scripts / f"p{n}.prof")}
                if args.threads:
                    tables["no thread limit"] = profile_command(tail, _env(), scripts / f"p{n}-d.prof", scripts / "dispatch.py")
                    tables["OPENBLAS_NUM_THREADS=1"] = profile_command(tail, _env({"OPENBLAS_NUM_THREADS": "1"}),
                                                                       scripts / f"p{n}-e.prof")
                    tables["threadpoolctl limit"] = profile_command(tail, _env(), scripts / f"p{n}-l.prof", scripts / "limited.py")
                print(f"\n{n:,} points: stages of the command (cProfile adds overhead; rows nest)")
                print_stage_tables(tables)
    if len(sizes) > 1:
        lo, hi = min(sizes), max(sizes)
        print(f"\nscaling: command at {hi:,} / at {lo:,} points = {results[hi]['command'] / results[lo]['command']:.2f} "
              f"(goal <= 3); astropy {results[hi]['astropy'] / results[lo]['astropy']:.2f}, floor "
              f"{results[hi]['floor'] / results[lo]['floor']:.2f}")

    n0 = min(sizes)
    print(f"\nperiodogram peak, fast path against the direct sums ({n0:,} points)")
    peak_agreement(*points[n0])
    if args.kernels:
        kernels(points, args.repeats)
    print(f"\ntotal runtime {time.perf_counter() - start:.0f} s")
    return 0


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--build-only":  # python benchmarks/bench_period.py --build-only N [CACHE]
        cache = Path(sys.argv[3]) if len(sys.argv) > 3 else Path(tempfile.gettempdir()) / "varstar-bench-period"
        print(cached_archive(cache, int(sys.argv[2]), 10.0, 0))
        raise SystemExit(0)
    raise SystemExit(main())

"""Helpers several test files share: the repository's folders, running the command line, and
invented light curves with known truth for the period tests.  (pytest finds this module
through ``pythonpath = ["tests"]`` in pyproject.toml.)"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from varstar.cli import main

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "demo_series"


# --------------------------------------------------------------------------- the command line


def strict_loads(text: str):
    """json.loads refusing NaN / Infinity (not JSON by RFC 8259)."""

    def refuse(token: str):
        raise ValueError(f"non-standard JSON constant {token}")

    return json.loads(text, parse_constant=refuse)


def one_json(out: str) -> dict:
    """stdout must be exactly one JSON object on one line and nothing else."""
    assert out.endswith("\n") and out.count("\n") == 1, out[:500]
    obj = strict_loads(out)
    assert isinstance(obj, dict)
    return obj


def run(capsys, *argv) -> tuple[int, str, str]:
    capsys.readouterr()
    rc = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return rc, out, err


def ok(capsys, *argv) -> str:
    rc, out, err = run(capsys, *argv)
    assert rc == 0, err
    assert err == "", err
    return out


# --------------------------------------------------------------------------- invented light curves


ONE_SIGMA = 0.6826894921370859  # P(|z| < 1) for a normal distribution
T_START = 2460100.0  # invented BJD_TDB origin of every scenario
TWO_PI = 2.0 * math.pi


def nightly(rng, nights, *, hours=6.0, cadence_min=8.0, spread=1.5, jitter_d=0.05, start=T_START):
    """Single-site sampling: ``nights`` clear nights among ``spread * nights``, one run each."""
    chosen = np.sort(rng.choice(np.arange(int(spread * nights)), nights, replace=False))
    starts = start + chosen + 0.30 + jitter_d * rng.standard_normal(nights)
    per = np.arange(0.0, hours / 24.0, cadence_min / 1440.0)
    t = (starts[:, None] + per[None, :]).ravel()
    return t + rng.normal(0.0, 0.0005, t.size)


def lomb_scargle(nterms=1):
    """astropy's periodogram (reference library) as the callable our modules take."""
    from astropy.timeseries import LombScargle

    def power(t, y, dy, freq):
        return LombScargle(t, y, dy, nterms=nterms).power(freq)

    return power


def harmonic_curve(t, f, amps, phases, t0, mean=12.0):
    """m + sum_k A_k cos(2 pi k f (t - t0) + phi_k): known Fourier truth."""
    k = np.arange(1, len(amps) + 1)
    return mean + (np.asarray(amps) * np.cos(TWO_PI * np.outer(t - t0, k) * f + np.asarray(phases))).sum(axis=1)


def detached_eb(t, period=2.7134, t0=T_START + 0.9, half_width=0.025, d1=0.6, d2=0.25):
    """Flat light curve with two narrow eclipses of different depth (phases 0 and 0.5)."""
    ph = ((t - t0) / period) % 1.0
    x1 = np.minimum(ph, 1.0 - ph) / half_width
    x2 = np.abs(ph - 0.5) / half_width
    return 11.0 + d1 * np.sqrt(np.clip(1 - x1**2, 0, None)) + d2 * np.sqrt(np.clip(1 - x2**2, 0, None))


def contact_binary(t, period=0.3312, t0=T_START + 0.37, unequal=0.025):
    """Continuous light curve with two minima per orbit; ``unequal`` mag makes them differ by 2x."""
    ph = (t - t0) / period
    return 12.0 + 0.20 * np.cos(2 * TWO_PI * ph) + 0.03 * np.cos(4 * TWO_PI * ph) + unequal * np.cos(TWO_PI * ph)


def binomial_ok(k, n, p, nsig=3.0):
    return abs(k / n - p) <= nsig * math.sqrt(p * (1 - p) / n)


F1 = 1 / 0.55  # fundamental of an invented double-mode pulsator
F2 = F1 / 0.745  # first overtone; ratio "from memory" (REFERENCES.md), a scenario parameter only


def double_mode(rng, extra=(), sig=0.03, nights=40):
    t = nightly(rng, nights, hours=5, cadence_min=10)
    y = 13 + 0.20 * np.cos(TWO_PI * F1 * (t - T_START) + 0.4) + 0.12 * np.cos(TWO_PI * F2 * (t - T_START) + 2.0)
    for f, a, p in extra:
        y = y + a * np.cos(TWO_PI * f * (t - T_START) + p)
    return t, y + sig * rng.standard_normal(t.size), np.full(t.size, sig)

"""Helpers shared by several period modules: input checks and linear error propagation.

Package-internal (the leading underscore of the module name); the names are
public so that the method modules import them without reaching into one
another's private helpers.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.results import sd

__all__ = ["check_freq", "check_series", "propagated_err"]


def check_series(
    t: Any, y: Any, dy: Any, *, min_points: int = 3, what: str = "light curve"
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return ``t, y, dy`` as finite 1-D float arrays of equal length, or raise InputError.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days), magnitudes and 1-sigma errors; ``dy=None`` means equal
        weights (all errors 1), a scalar ``dy`` is the error of every point.
    min_points : int
        Fewest points accepted.
    what : str
        What the caller computes, for the messages.

    Raises
    ------
    InputError
        Arrays not 1-D or of different lengths, too few points, non-finite
        values or an error that is not positive.
    """
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    dy = np.ones_like(y) if dy is None else np.asarray(dy, dtype=float)
    if dy.ndim == 0:
        dy = np.full_like(y, float(dy))
    if t.ndim != 1 or y.ndim != 1 or dy.ndim != 1:
        raise InputError(f"{what}: times, magnitudes and errors must be 1-D arrays")
    if not (t.size == y.size == dy.size):
        raise InputError(
            f"{what}: times ({t.size}), magnitudes ({y.size}) and errors ({dy.size}) "
            "must have the same length"
        )
    if t.size < min_points:
        raise InputError(f"{what}: {t.size} points given, at least {min_points} are needed")
    bad = ~(np.isfinite(t) & np.isfinite(y) & np.isfinite(dy))
    if bad.any():
        raise InputError(
            f"{what}: {int(bad.sum())} points have a non-finite time, magnitude or error; "
            "drop them before the period analysis"
        )
    if np.any(dy <= 0):
        raise InputError(f"{what}: every magnitude error must be positive (got {dy.min():g})")
    return t, y, dy


def check_freq(freq: Any, *, what: str = "frequency grid") -> np.ndarray:
    """Return ``freq`` as a non-empty 1-D array of finite frequencies (cycles/day), or raise InputError.

    A scalar becomes a one-element array.  Unlike
    :func:`varstar.period.gls.check_frequencies` (the periodogram's rule) zero and
    negative frequencies pass: a spectral window or an amplitude spectrum is
    defined there.
    """
    freq = np.asarray(freq, dtype=float)
    if freq.ndim == 0:
        freq = freq.reshape(1)
    if freq.ndim != 1 or freq.size == 0:
        raise InputError(f"{what}: give a non-empty 1-D array of frequencies (cycles/day)")
    if not np.all(np.isfinite(freq)):
        raise InputError(f"{what}: frequencies must be finite")
    return freq


def propagated_err(g: np.ndarray, cov: np.ndarray) -> float:
    """1-sigma error of the linear function with gradient ``g`` of parameters with covariance ``cov``.

    ``sqrt(g^T C g)`` (linear propagation); NaN when the variance is negative or NaN
    (see :func:`varstar.results.sd`).
    """
    return sd(g @ cov @ g)

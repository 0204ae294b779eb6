"""Input checks shared by the timing modules (pure; numpy only).

Every estimator, the coverage rules and the search take a night's times,
magnitudes and errors through :func:`series`, and every function that is told
a kind of extremum checks it with :func:`check_kind`, so the messages are the
same wherever a mistake is caught.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InputError

__all__ = ["KINDS", "check_kind", "series"]

#: What an ephemeris predicts: minima (of light) or maxima (of light).
KINDS = ("minimum", "maximum")


def check_kind(kind: str, what: str = "kind") -> str:
    """``kind`` itself when it is one of :data:`KINDS`, else InputError naming ``what``."""
    if kind not in KINDS:
        raise InputError(f"{what} must be 'minimum' or 'maximum', got {kind!r}")
    return kind


def series(t: Any, mag: Any, mag_err: Any = None, *, what: str, min_points: int) -> tuple[np.ndarray, ...]:
    """Finite 1-D float arrays sorted by time, or InputError.

    Parameters
    ----------
    t, mag
        Times and magnitudes.
    mag_err
        Optional magnitude errors (a scalar is applied to every point); they
        must be positive.
    what
        How to name the data in messages.
    min_points
        Fewest points accepted.

    Returns
    -------
    (t, mag) or (t, mag, mag_err)
        Sorted by time (stable, so repeated times keep their order).
    """
    t = np.asarray(t, dtype=float)
    mag = np.asarray(mag, dtype=float)
    arrays = [t, mag]
    if mag_err is not None:
        err = np.asarray(mag_err, dtype=float)
        if err.ndim == 0:
            err = np.full_like(mag, float(err))
        arrays.append(err)
    if any(a.ndim != 1 for a in arrays) or len({a.size for a in arrays}) != 1:
        raise InputError(f"{what}: times, magnitudes (and errors) must be 1-D arrays of one length")
    if not all(np.all(np.isfinite(a)) for a in arrays):
        raise InputError(f"{what}: non-finite times, magnitudes or errors; drop those points first")
    if mag_err is not None and np.any(arrays[2] <= 0):
        raise InputError(f"{what}: every magnitude error must be positive")
    if t.size < min_points:
        raise InputError(f"{what}: {t.size} points given, at least {min_points} are needed")
    order = np.argsort(t, kind="stable")
    return tuple(a[order] for a in arrays)

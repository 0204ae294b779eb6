"""Trial-frequency grids for periodograms.

A periodogram peak of a series spanning a baseline ``T`` has a width of about
``1/T`` in frequency, so the grid step must be a fraction of that:
``df = 1 / (n0 * T)`` with an oversampling factor ``n0`` of 5-10 (VanderPlas
2018, ApJS 236, 16, section 7.1).  The grid here is uniform in frequency
(``f_k = f_min + k df``), which is also what the fast (non-uniform FFT) path of
:func:`varstar.period.gls.gls_power` requires.

Frequencies are in cycles per day, periods in days.
"""

from __future__ import annotations

import numpy as np

from varstar.errors import InputError

#: Fewest points a periodogram is computed from.  A single-term model has
#: three free parameters; twelve points leave a few degrees of freedom for the
#: noise (common practice: below about a dozen points a "period" is anecdote).
MIN_POINTS = 12

#: Default shortest trial period in days (highest frequency 20 cycles/day).
#: Ground-based nightly series rarely sample faster than this usefully
#: (common practice; pass ``min_period`` for short-period pulsators).
DEFAULT_MIN_PERIOD_D = 0.05

#: Default cap on the longest trial period in days.
DEFAULT_MAX_PERIOD_CAP_D = 1000.0

#: Default refusal threshold on the number of trial frequencies.
DEFAULT_MAX_GRID = 50_000_000


def validate_times(t: np.ndarray, *, name: str = "t") -> np.ndarray:
    """Return ``t`` as a 1-D float array after checking it is usable.

    Parameters
    ----------
    t : array_like
        Observation times in days (e.g. BJD_TDB).
    name : str, optional
        Name used in error messages.

    Returns
    -------
    numpy.ndarray
        The times as a contiguous float64 array.

    Raises
    ------
    InputError
        If ``t`` is empty, not one-dimensional, has non-finite values, has
        fewer than :data:`MIN_POINTS` entries or spans no time at all.
    """
    t = np.asarray(t, dtype=float)
    if t.ndim != 1:
        raise InputError(f"{name} must be a one-dimensional array of times in days; got shape {t.shape}")
    if t.size == 0:
        raise InputError(f"{name} is empty: a periodogram needs at least {MIN_POINTS} observations")
    bad = ~np.isfinite(t)
    if bad.any():
        raise InputError(
            f"{name} has {int(bad.sum())} non-finite value(s) (NaN or inf), first at index "
            f"{int(np.flatnonzero(bad)[0])}; drop those observations before computing a periodogram"
        )
    if t.size < MIN_POINTS:
        raise InputError(
            f"{name} has only {t.size} observation(s); a periodogram needs at least {MIN_POINTS}"
        )
    if not np.ptp(t) > 0:
        raise InputError(f"all {t.size} times in {name} are equal; a periodogram needs a time baseline")
    return np.ascontiguousarray(t)


def frequency_grid(
    t: np.ndarray,
    *,
    min_period: float | None = None,
    max_period: float | None = None,
    oversampling: float = 10.0,
    max_grid: int = DEFAULT_MAX_GRID,
) -> np.ndarray:
    """Uniform grid of trial frequencies (cycles/day) for a series of times.

    Parameters
    ----------
    t : array_like
        Observation times in days, shape (N,), N >= 12.
    min_period : float, optional
        Shortest trial period in days; sets the highest frequency
        ``1/min_period``.  Default 0.05 d (20 cycles/day).
    max_period : float, optional
        Longest trial period in days; sets the lowest frequency
        ``1/max_period``.  Default ``min(T/2, 1000 d)`` with ``T`` the
        baseline, so that at least two cycles are covered.  It may not exceed
        the baseline.
    oversampling : float, optional
        Grid points per peak width ``1/T`` (``n0`` of VanderPlas 2018, who
        recommends 5-10).  Default 10.  Must be at least 1.
    max_grid : int, optional
        Refuse grids with more frequencies than this (default 5e7, about
        400 MB per float64 periodogram).

    Returns
    -------
    numpy.ndarray
        Frequencies ``f_k = 1/max_period + k / (oversampling * T)``,
        ``k = 0 .. K``, the last one not above ``1/min_period``.

    Raises
    ------
    InputError
        For fewer than 12 or non-finite times, non-positive or inverted
        period limits, a ``max_period`` longer than the baseline, an
        oversampling below 1, or a grid larger than ``max_grid``.
    """
    t = validate_times(t)
    baseline = float(np.ptp(t))
    if not np.isfinite(oversampling) or oversampling < 1.0:
        raise InputError(
            f"oversampling must be a finite number >= 1 (5-10 is usual); got {oversampling!r}"
        )
    if min_period is None:
        min_period = DEFAULT_MIN_PERIOD_D
    min_period = float(min_period)
    if not np.isfinite(min_period) or min_period <= 0:
        raise InputError(f"min_period must be a positive number of days; got {min_period!r}")
    if max_period is None:
        max_period = min(baseline / 2.0, DEFAULT_MAX_PERIOD_CAP_D)
        if max_period <= min_period:
            raise InputError(
                f"a baseline of {baseline:.6g} d is too short for periods from {min_period:.6g} d: "
                f"the default longest period is half the baseline ({max_period:.6g} d); "
                "observe longer or lower min_period"
            )
    max_period = float(max_period)
    if not np.isfinite(max_period) or max_period <= 0:
        raise InputError(f"max_period must be a positive number of days; got {max_period!r}")
    if min_period >= max_period:
        raise InputError(
            f"min_period ({min_period:.6g} d) must be shorter than max_period ({max_period:.6g} d)"
        )
    if max_period > baseline:
        raise InputError(
            f"a baseline of {baseline:.6g} d cannot show a period of {max_period:.6g} d; "
            f"lower max_period to at most {baseline:.6g} d (half of it is safer)"
        )
    f_min = 1.0 / max_period
    f_max = 1.0 / min_period
    df = 1.0 / (oversampling * baseline)
    n_freq = int(np.floor((f_max - f_min) / df * (1.0 + 1e-12))) + 1
    if n_freq > max_grid:
        raise InputError(
            f"the frequency grid would have {n_freq:,} frequencies (more than max_grid={max_grid:,}): "
            f"raise min_period (now {min_period:.6g} d), lower oversampling (now {oversampling:g}) "
            "or pass a larger max_grid"
        )
    return f_min + df * np.arange(n_freq, dtype=float)

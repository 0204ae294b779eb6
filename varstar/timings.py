"""Times of minimum and maximum, O - C and ephemeris fits (pure core).

Arrays in, frozen dataclasses out; nothing here reads files, prints or knows
about the archive.  All times are BJD_TDB (days); magnitudes are magnitudes, so
a *minimum of light* (an eclipse) is a *maximum of magnitude*.

The pieces
----------
* :class:`Ephemeris` ``T(E) = T0 + P E + Q E**2`` and
  :func:`ephemeris_from_table` (a target's ``[ephemeris]`` TOML table);
  :func:`predict_extrema` and :func:`o_minus_c`.
* Two independent estimates of the time of an extremum from one night:
  :func:`kwee_van_woerden` (Kwee & van Woerden 1956, BAN 12, 327) and
  :func:`symmetric_fit` (a symmetric polynomial in ``(t - t0)**2`` with a
  bootstrap error).
* :func:`template_fit`: the star's own mean light curve shifted in time, for the
  asymmetric maxima of pulsating stars.
* :func:`check_coverage`, the rules deciding whether a night covers a predicted
  extremum well enough to time it, and :func:`find_timings`, which applies
  both estimators to every covered extremum of a night and returns the
  timings and, for the others, a plain reason.
* :func:`fit_ephemeris`: weighted linear and quadratic ephemerides from
  timings, with an F-test for the quadratic term and the period change.

Kwee & van Woerden: the error
-----------------------------
The published error ``sigma**2 = (4ac - b**2) / (4 a**2 (Z - 1))`` assumes that
the ``Z`` reflected pairs are independent.  Once the light curve has been
interpolated onto an even grid they are not: an interpolated value carries
only ``(1-f)**2 + f**2`` (2/3 on average) of a point's noise variance, and a
grid finer than the data uses each observation in several pairs.  Counted
naively (``Z`` = number of grid pairs) the formula underestimates the error by
a factor ~1.25 for jittered, ~1.5 for randomly spaced times and ~1.9 on a grid
twice as fine as the data (measured in ``tests/test_timings.py``).  Here ``Z`` is the
*effective* number of independent pairs obtained by propagating the
interpolation weights (see :func:`_effective_pairs`): with the grid on evenly
spaced observations it equals the number of pairs exactly, as in the paper.
Independently, the three trial times are spread far enough apart that the
random change of S(T) from one pairing to the next does not dominate the
parabola (see :func:`kwee_van_woerden`).  Pull tests on simulated minima then
give a pull standard deviation within a few per cent of 1 at good
signal-to-noise, rising to ~1.1 when the point-to-point noise reaches a sixth
of the depth.  When the extremum is coarsely sampled (a grid step of ~0.4 of
its Gaussian width) the error is conservative (pull std ~0.6 measured): S(T)
then departs from a parabola between trial times and S_min grows.

Both estimators assume a symmetric extremum.  For an asymmetric one they time
the centre of symmetry of the data, not the extremum; the S_min of Kwee &
van Woerden, compared with what the magnitude errors explain
(:attr:`KweeVanWoerden.asymmetry`), detects that, and :func:`find_timings`
adds a note.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np

from .errors import InputError, ReductionError
from .results import json_float as _jf, sd

__all__ = [
    "ASYMMETRY_PVALUE",
    "DISAGREE_SIGMA",
    "KINDS",
    "Coverage",
    "Ephemeris",
    "EphemerisFit",
    "KweeVanWoerden",
    "PolynomialEphemeris",
    "Refusal",
    "SymmetricFit",
    "Timing",
    "check_coverage",
    "ephemeris_from_table",
    "find_timings",
    "fit_ephemeris",
    "kwee_van_woerden",
    "o_minus_c",
    "predict_extrema",
    "symmetric_fit",
]

#: What an ephemeris predicts: minima (of light) or maxima (of light).
KINDS = ("minimum", "maximum")
#: Two estimates of one time "disagree" beyond this many combined standard errors.
DISAGREE_SIGMA = 3.0
#: A timing gets an asymmetry note when Kwee & van Woerden's asymmetry p-value is below this
#: (about 0 of 300 symmetric simulated minima reach it; a skewed maximum reaches 1e-100).
ASYMMETRY_PVALUE = 1e-3
#: Plausible BJD_TDB range for an epoch: JD 2300000 is 1585, JD 2600000 is 2406.
BJD_PLAUSIBLE = (2_300_000.0, 2_600_000.0)
SECONDS_PER_DAY = 86400.0
#: Julian year in days (IAU).
DAYS_PER_YEAR = 365.25
_EPHEMERIS_KEYS = ("epoch", "period", "quadratic", "kind", "time_system", "epoch_err", "period_err", "quadratic_err")


def _check_kind(kind: str, what: str = "kind") -> str:
    if kind not in KINDS:
        raise InputError(f"{what} must be 'minimum' or 'maximum', got {kind!r}")
    return kind


# --------------------------------------------------------------------------- ephemeris


@dataclass(frozen=True)
class Ephemeris:
    """``T(E) = epoch + period E + quadratic E**2`` (BJD_TDB, days).

    Attributes
    ----------
    epoch
        T0, BJD_TDB of cycle 0.
    period
        P in days (the period at cycle 0).
    quadratic
        Q in days; the period at cycle E is ``P + 2 Q E`` (dP/dE = 2Q).
    kind
        ``"minimum"`` (cycle 0 is a minimum of light; half-integer cycles are
        secondary minima) or ``"maximum"``.
    epoch_err, period_err, quadratic_err
        Standard errors, NaN when unknown.
    """

    epoch: float
    period: float
    quadratic: float = 0.0
    kind: str = "minimum"
    epoch_err: float = math.nan
    period_err: float = math.nan
    quadratic_err: float = math.nan

    def __post_init__(self) -> None:
        for name in ("epoch", "period", "quadratic"):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)) or not math.isfinite(v):
                raise InputError(f"ephemeris {name} must be a finite number, got {v!r}")
        if self.period <= 0:
            raise InputError(f"ephemeris period must be positive, got {self.period}")
        _check_kind(self.kind, "ephemeris kind")

    def time_of(self, cycle: Any) -> np.ndarray | float:
        """BJD_TDB of cycle ``E`` (any real E; half-integers are secondary minima)."""
        e = np.asarray(cycle, dtype=float)
        out = self.epoch + self.period * e + self.quadratic * e * e
        return float(out) if out.ndim == 0 else out

    def cycle_of(self, bjd_tdb: Any) -> np.ndarray | float:
        """Real-valued cycle number E with ``time_of(E) = bjd_tdb``.

        For ``Q != 0`` the root of ``Q E**2 + P E - (t - T0) = 0`` that continues
        the linear ephemeris (E -> (t - T0)/P as Q -> 0) is returned, written as
        ``2 (t - T0) / (P + sqrt(P**2 + 4 Q (t - T0)))`` to avoid cancellation.
        Beyond the turning point of a decreasing period (no real root) the result
        is NaN.
        """
        d = np.asarray(bjd_tdb, dtype=float) - self.epoch
        with np.errstate(invalid="ignore"):
            disc = self.period**2 + 4.0 * self.quadratic * d
            out = np.where(disc >= 0.0, 2.0 * d / (self.period + np.sqrt(np.maximum(disc, 0.0))), np.nan)
        return float(out) if out.ndim == 0 else out

    def period_at(self, cycle: Any) -> np.ndarray | float:
        """Instantaneous period ``P + 2 Q E`` (days) at cycle E."""
        e = np.asarray(cycle, dtype=float)
        out = self.period + 2.0 * self.quadratic * e
        return float(out) if out.ndim == 0 else out

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict (unknown errors become None)."""
        return {
            "epoch": float(self.epoch),
            "period": float(self.period),
            "quadratic": float(self.quadratic),
            "kind": self.kind,
            "time_system": "BJD_TDB",
            "epoch_err": _jf(self.epoch_err),
            "period_err": _jf(self.period_err),
            "quadratic_err": _jf(self.quadratic_err),
        }


def _number(table: Mapping, key: str, where: str, *, required: bool) -> float | None:
    v = table.get(key)
    if v is None:
        if required:
            raise InputError(f"{where}.{key} is missing: give it as a number")
        return None
    from .target import finite_number  # the one numeric check (huge integers included)

    return finite_number(v, f"{where}.{key}")


def ephemeris_from_table(table: Mapping, where: str) -> Ephemeris:
    """Validate an ``[ephemeris]`` TOML table and return the :class:`Ephemeris`.

    Parameters
    ----------
    table
        Keys ``epoch`` (BJD_TDB) and ``period`` (days) required; optional
        ``quadratic`` (days, default 0), ``kind`` (``"minimum"`` by default or
        ``"maximum"``), ``time_system`` (only ``"BJD_TDB"``), and
        ``epoch_err``, ``period_err``, ``quadratic_err`` (non-negative).
    where
        How to name the table in messages, e.g. ``"star.toml: [ephemeris]"``;
        keys are appended as ``{where}.{key}``.

    Raises
    ------
    InputError
        Naming ``where`` and the key, and saying what to do: unknown keys, a
        non-positive or non-finite period, an epoch that looks like an MJD or a
        reduced JD (with what to add), an epoch outside the plausible BJD
        range, a time system other than BJD_TDB, an unknown ``kind``.
    """
    if not isinstance(table, Mapping):
        raise InputError(f"{where} must be a table with epoch and period")
    unknown = sorted(set(table) - set(_EPHEMERIS_KEYS))
    if unknown:
        raise InputError(f"{where}: unknown key(s) {', '.join(unknown)}; known keys are {', '.join(_EPHEMERIS_KEYS)}")
    ts = table.get("time_system", "BJD_TDB")
    if not isinstance(ts, str) or ts.strip().upper() != "BJD_TDB":
        raise InputError(
            f"{where}.time_system is {ts!r}: only BJD_TDB is accepted; convert the epoch to BJD_TDB "
            "(HJD and JD(UTC) differ from it by up to minutes) and set time_system = \"BJD_TDB\" or leave it out"
        )
    period = _number(table, "period", where, required=True)
    if period <= 0:
        raise InputError(f"{where}.period must be positive (days), got {period:g}")
    epoch = _number(table, "epoch", where, required=True)
    if 0.0 < epoch < 100_000.0:
        raise InputError(
            f"{where}.epoch = {epoch:g} looks like a shortened date, not a full BJD_TDB: an MJD (JD - 2400000.5) needs "
            "2400000.5 added, a reduced JD (JD - 2400000) needs 2400000 added (and a date given as JD - 2450000 "
            "needs 2450000 added); give the full BJD_TDB, e.g. 2460123.4567"
        )
    if not (BJD_PLAUSIBLE[0] <= epoch <= BJD_PLAUSIBLE[1]):
        raise InputError(
            f"{where}.epoch = {epoch:g} is outside the plausible BJD_TDB range "
            f"{BJD_PLAUSIBLE[0]:.0f}-{BJD_PLAUSIBLE[1]:.0f} (years 1585-2406); give the full BJD_TDB of a minimum or maximum"
        )
    quadratic = _number(table, "quadratic", where, required=False) or 0.0
    kind = table.get("kind", "minimum")
    if kind not in KINDS:
        raise InputError(f"{where}.kind must be \"minimum\" or \"maximum\", got {kind!r}")
    errs = {}
    for key in ("epoch_err", "period_err", "quadratic_err"):
        v = _number(table, key, where, required=False)
        if v is not None and v < 0:
            raise InputError(f"{where}.{key} must not be negative, got {v:g}")
        errs[key] = math.nan if v is None else v
    return Ephemeris(epoch=epoch, period=period, quadratic=quadratic, kind=kind, **errs)


def predict_extrema(
    ephemeris: Ephemeris, start_bjd: float, end_bjd: float, *, secondary: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Cycles and BJD_TDB of the predicted extrema in ``[start_bjd, end_bjd]``.

    Parameters
    ----------
    ephemeris
        The ephemeris.
    start_bjd, end_bjd
        The interval (BJD_TDB).
    secondary
        Also return the secondary minima (half-integer cycles).  Only for an
        ephemeris of minima.

    Returns
    -------
    (cycles, bjd_tdb)
        Float arrays in time order; cycles are integers (or half-integers).
    """
    if not (math.isfinite(start_bjd) and math.isfinite(end_bjd)) or end_bjd < start_bjd:
        raise InputError(f"predict_extrema: give a finite interval with start <= end, got {start_bjd}, {end_bjd}")
    if secondary and ephemeris.kind != "minimum":
        raise InputError("secondary extrema exist only for an ephemeris of minima (kind = \"minimum\")")
    e0, e1 = ephemeris.cycle_of(start_bjd), ephemeris.cycle_of(end_bjd)
    if not (math.isfinite(e0) and math.isfinite(e1)):
        raise InputError(
            f"the quadratic ephemeris has no cycle at BJD_TDB {start_bjd:.5f}-{end_bjd:.5f}: its period "
            "P + 2QE reaches zero there; the ephemeris cannot be extrapolated so far"
        )
    step = 0.5 if secondary else 1.0
    lo = math.floor(min(e0, e1) / step) - 1
    hi = math.ceil(max(e0, e1) / step) + 1
    cycles = np.arange(lo, hi + 1, dtype=float) * step
    times = np.asarray(ephemeris.time_of(cycles), dtype=float)
    keep = (times >= start_bjd) & (times <= end_bjd)
    order = np.argsort(times[keep], kind="stable")
    return cycles[keep][order], times[keep][order]


def o_minus_c(
    times: Any, ephemeris: Ephemeris, *, secondary_allowed: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """Cycle numbers and O - C (days) of observed times against an ephemeris.

    Each time gets the nearest integer cycle, or, for an ephemeris of minima with
    ``secondary_allowed``, the nearest half-integer.  A primary minimum observed
    more than P/4 from its prediction is therefore taken for a secondary:
    decide the type from the light curve when O - C can be that large.

    Returns
    -------
    (cycles, o_minus_c)
        Float arrays of the input's shape.
    """
    t = np.asarray(times, dtype=float)
    if not np.all(np.isfinite(t)):
        raise InputError("o_minus_c: every time must be a finite BJD_TDB")
    e = np.asarray(ephemeris.cycle_of(t), dtype=float)
    if not np.all(np.isfinite(e)):
        raise InputError("o_minus_c: some times lie beyond the turning point of the quadratic ephemeris")
    half = secondary_allowed and ephemeris.kind == "minimum"
    cycles = np.round(2.0 * e) / 2.0 if half else np.round(e)
    return cycles, t - np.asarray(ephemeris.time_of(cycles), dtype=float)


# --------------------------------------------------------------------------- input checks


def _series(t: Any, mag: Any, mag_err: Any = None, *, what: str, min_points: int) -> tuple[np.ndarray, ...]:
    """Finite 1-D float arrays sorted by time, or InputError."""
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


# --------------------------------------------------------------------------- Kwee & van Woerden


@dataclass(frozen=True)
class KweeVanWoerden:
    """Time of an extremum by Kwee & van Woerden (1956).

    Attributes
    ----------
    time, err
        The time (BJD_TDB or the input's time unit) and its standard error.
    n_pairs
        Z, the effective number of independent reflected pairs (see the module
        docstring); equals ``n_grid_pairs`` for evenly spaced data on the grid.
    n_grid_pairs
        Number of grid pairs summed in S(T).
    grid_step
        Spacing of the even grid (days).
    trial_spacing
        Spacing of the three trial times (days).
    s_min, curvature
        Minimum of the fitted parabola S(T) = a T^2 + b T + c, ``(4ac - b^2)/(4a)``,
        and its ``a`` (mag^2/day^2).
    n_points
        Observations used.
    s_noise
        The S_min that the given magnitude errors alone would leave (NaN
        without errors).
    asymmetry
        ``s_min / s_noise``: ~1 for a symmetric extremum with honest errors,
        large when the branches are not mirror images (then a symmetric method
        times the centre of the window's symmetry, not the extremum).
    asymmetry_pvalue
        Chance of an asymmetry this large from noise alone, taking
        ``(Z - 1) * asymmetry`` as chi-square with Z - 1 degrees of freedom (an
        approximation: the pairs are correlated).
    """

    time: float
    err: float
    n_pairs: float
    n_grid_pairs: int
    grid_step: float
    trial_spacing: float
    s_min: float
    curvature: float
    n_points: int
    s_noise: float = math.nan
    asymmetry: float = math.nan
    asymmetry_pvalue: float = math.nan
    method: str = "kwee-van-woerden"

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "method": self.method,
            "time": float(self.time),
            "err": _jf(self.err),
            "n_pairs": _jf(self.n_pairs),
            "n_grid_pairs": int(self.n_grid_pairs),
            "grid_step": float(self.grid_step),
            "trial_spacing": float(self.trial_spacing),
            "s_min": float(self.s_min),
            "curvature": float(self.curvature),
            "n_points": int(self.n_points),
            "s_noise": _jf(self.s_noise),
            "asymmetry": _jf(self.asymmetry),
            "asymmetry_pvalue": _jf(self.asymmetry_pvalue),
        }


def _pair_indices(c: np.ndarray, n_pairs: int) -> tuple[np.ndarray, np.ndarray]:
    """Grid indices (lo, hi) = (c - k, c + k), k = 1..n_pairs, of the pairs reflected about grid points c."""
    k = np.arange(1, n_pairs + 1)
    return c[:, None] - k[None, :], c[:, None] + k[None, :]


def _s_values(g: np.ndarray, c: np.ndarray, n_pairs: int) -> np.ndarray:
    """S = sum of squared reflected differences about grid points c, n_pairs pairs each.

    Evaluated in row chunks so that memory stays below ~16 MB for long nights.
    """
    out = np.empty(c.size)
    chunk = max(1, 400_000 // max(n_pairs, 1))
    for s in range(0, c.size, chunk):
        lo, hi = _pair_indices(c[s : s + chunk], n_pairs)
        d = g[hi] - g[lo]
        out[s : s + chunk] = np.einsum("ij,ij->i", d, d)
    return out


def _effective_pairs(
    t: np.ndarray, grid: np.ndarray, g: np.ndarray, c: int, n_pairs: int, var: np.ndarray | None = None
) -> tuple[float, float]:
    """Effective number Z of independent reflected pairs, by propagating the interpolation.

    Each grid value is ``g_i = (1 - f_i) y_a + f_i y_{a+1}``, so the pair
    difference ``e_k = g_hi - g_lo`` is a fixed combination ``w_k . y`` of the
    observations.  Linearising S(T) about the minimum (``D_k`` the derivative of
    the k-th difference with respect to T), the minimiser has variance
    ``sigma^2 |sum_k D_k w_k|^2 / (sum_k D_k^2)^2`` and S_min has expectation
    ``sigma^2 (sum_k |w_k|^2 - |sum_k D_k w_k|^2 / sum_k D_k^2)``.  Putting both
    into the published ``sigma_T^2 = S_min / (a (Z - 1))`` with ``a = sum D_k^2``
    gives ``Z = sum_k |w_k|^2 sum_k D_k^2 / |sum_k D_k w_k|^2``.  For independent
    pairs (``w_k`` two disjoint unit entries) this is exactly the number of
    pairs.  The D_k come from the grid curve's slope (lightly smoothed); they
    enter only as relative weights.  Derived here, not taken from the paper.

    With the variances ``var`` of the observations, the second value returned
    is the S_min that noise alone would leave, ``sum_k w_k' V w_k -
    (sum_k D_k w_k)' V (sum_k D_k w_k) / sum_k D_k^2`` (NaN without ``var``).
    """
    from scipy.ndimage import uniform_filter1d
    from scipy.sparse import csr_matrix

    n = t.size
    dt = grid[1] - grid[0]
    lo, hi = _pair_indices(np.array([c]), n_pairs)
    lo, hi = lo[0], hi[0]
    slope = uniform_filter1d(np.gradient(g, dt), size=5, mode="nearest")
    d = slope[hi] - slope[lo]
    a = np.clip(np.searchsorted(t, grid, side="right") - 1, 0, n - 2)
    f = (grid - t[a]) / (t[a + 1] - t[a])
    rows = np.repeat(np.arange(n_pairs), 4)
    cols = np.stack([a[hi], a[hi] + 1, a[lo], a[lo] + 1], axis=1).ravel()
    vals = np.stack([1.0 - f[hi], f[hi], -(1.0 - f[lo]), -f[lo]], axis=1).ravel()
    w = csr_matrix((vals, (rows, cols)), shape=(n_pairs, n))  # duplicates are summed
    sum_w2 = float(w.multiply(w).sum())
    v = w.T @ d
    denom = float(v @ v)
    if denom <= 0.0:
        return math.nan, math.nan
    z = sum_w2 * float(d @ d) / denom
    expected = math.nan
    if var is not None:
        expected = float(np.asarray(w.multiply(w).sum(axis=0)).ravel() @ var) - float((v * v) @ var) / float(d @ d)
    return z, expected


def _kvw_solve(g: np.ndarray, kmax: np.ndarray, c0: int, m: int) -> tuple[int, int, float, float, float]:
    """Three trial grid points ``c - m, c, c + m`` around the minimum of S.

    The number of pairs is the largest the data allow at the outer trial
    points; with that number fixed, S is minimised over every grid point that
    supports it, and the number is lowered until the minimum lies at least m
    points inside that range (S is comparable only at a fixed number of pairs
    with the same offsets, which is why trial times are grid points only: a
    half-way centre pairs points at offsets (k - 1/2) dt, a grid point at k dt).
    """
    last = kmax.size - 1
    n_pairs = int(min(kmax[max(c0 - m, 0)], kmax[min(c0 + m, last)]))
    while n_pairs >= 2:
        sup = np.flatnonzero(kmax >= n_pairs)
        s_all = _s_values(g, sup, n_pairs)
        i = int(np.argmin(s_all))
        if m <= i < sup.size - m:
            return int(sup[i]), n_pairs, float(s_all[i - m]), float(s_all[i]), float(s_all[i + m])
        n_pairs -= 1
    raise ReductionError(
        "Kwee-van Woerden: the minimum of S(T) keeps falling at the edge of the searchable range; "
        "the extremum is not well inside the data, centre the data on it"
    )


def kwee_van_woerden(
    t: Any,
    mag: Any,
    mag_err: Any = None,
    *,
    n_grid: int | None = None,
    spacing_factor: float = 4.0,
) -> KweeVanWoerden:
    """Time of a symmetric extremum, Kwee & van Woerden (1956, BAN 12, 327).

    The published procedure:

    1. interpolate the light curve linearly onto an even grid (``n_grid``
       points, by default as many as there are distinct observation times);
    2. for a trial time T on the grid, reflect one branch about T and sum the
       squared magnitude differences of the n pairs ``(T - k dt, T + k dt)``,
       S(T) (n fixed for all trial times compared);
    3. fit ``S = a T^2 + b T + c`` through three trial times around the
       minimum of S: ``t0 = -b / (2a)``;
    4. ``sigma^2 = (4ac - b^2) / (4 a^2 (Z - 1))``, Z the number of
       independent pairs.

    Two things are ours and are documented in the module docstring: Z is the
    *effective* number of independent pairs (:func:`_effective_pairs`), and the
    three trial times are not adjacent grid points when that would make the
    parabola follow the noise of S: their spacing is widened until it is at
    least ``spacing_factor * sqrt(n) * sigma`` (at most a sixth of the
    reflected half-span).  The scatter of the vertex caused by the change of
    pairing between trial times, relative to sigma, scales as
    ``sqrt(n) sigma / spacing``; the factor 4 keeps its share of the variance
    to a few per cent (measured in the tests).

    S(T) is unchanged when the magnitudes change sign, so the same call times a
    minimum or a maximum of light.  Times are used relative to the first one,
    so full BJD_TDB values lose no precision.

    Parameters
    ----------
    t, mag
        Times (days) and magnitudes of one extremum, roughly centred on it:
        the minimum of S is first searched in the middle half of the time span.
        Repeated times are averaged.
    mag_err
        Optional magnitude errors.  They do not change the time or its error
        (the method is unweighted; its error comes from the scatter itself);
        they only feed the asymmetry diagnostic.
    n_grid
        Number of grid points (default: number of distinct times).
    spacing_factor
        See above.

    Raises
    ------
    InputError
        Fewer than 7 distinct times, non-finite values.
    ReductionError
        No interior minimum of S, or a parabola that does not open upwards.
    """
    if mag_err is None:
        t, mag = _series(t, mag, what="Kwee-van Woerden", min_points=7)
        var = None
    else:
        t, mag, err = _series(t, mag, mag_err, what="Kwee-van Woerden", min_points=7)
    t_first = t[0]
    tu, inv = np.unique(t - t_first, return_inverse=True)
    if tu.size < 7:
        raise InputError(f"Kwee-van Woerden: {tu.size} distinct times, at least 7 are needed")
    counts = np.bincount(inv)
    y = np.bincount(inv, weights=mag) / counts
    if mag_err is not None:
        var = np.bincount(inv, weights=err**2) / counts**2  # variance of each averaged magnitude
    ng = tu.size if n_grid is None else int(n_grid)
    if ng < 7:
        raise InputError(f"Kwee-van Woerden: n_grid must be at least 7, got {ng}")
    grid = np.linspace(tu[0], tu[-1], ng)
    dt = grid[1] - grid[0]
    g = np.interp(grid, tu, y)
    idx = np.arange(ng)
    kmax = np.minimum(idx, ng - 1 - idx)
    # Rough centre: S with a fixed number of pairs over the middle half of the span.
    n0 = max(2, (ng - 1) // 4)
    sup0 = np.flatnonzero(kmax >= n0)
    s0 = _s_values(g, sup0, n0)
    i0 = int(np.argmin(s0))
    if not s0.max() - s0.min() > 1e-9 * s0.max():
        raise ReductionError("Kwee-van Woerden: S(T) is the same at every trial time; the data show no extremum")
    if i0 == 0 or i0 == sup0.size - 1:
        raise ReductionError(
            "Kwee-van Woerden: S(T) is smallest at the edge of the middle half of the data; "
            "the extremum is not near the middle of the time span, centre the data on it"
        )
    c0 = int(sup0[i0])
    m, seen = 1, set()
    while True:
        c, n_pairs, s_lo, s_mid, s_hi = _kvw_solve(g, kmax, c0, m)
        h = m * dt
        # Parabola through (-h, s_lo), (0, s_mid), (h, s_hi), T measured from the middle trial time.
        a = (s_hi + s_lo - 2.0 * s_mid) / (2.0 * h * h)
        b = (s_hi - s_lo) / (2.0 * h)
        if not a > 0.0:
            raise ReductionError("Kwee-van Woerden: S(T) has no curvature at its minimum; no extremum to time")
        # (4ac - b^2) / (4a); it can dip below 0 only for noiseless, non-parabolic S.
        s_min = max(s_mid - b * b / (4.0 * a), 0.0)
        z, s_noise = _effective_pairs(tu, grid, g, c, n_pairs, var)
        if not z > 1.0:
            raise ReductionError(f"Kwee-van Woerden: only {z:.2f} independent pairs; too few points")
        sigma = math.sqrt(s_min / (a * (z - 1.0)))
        seen.add(m)
        need = spacing_factor * math.sqrt(n_pairs) * sigma
        m_new = int(min(max(math.ceil(need / dt), 1), max(1, n_pairs // 6)))
        if m_new <= m or m_new in seen:
            break
        m = m_new
    if not sigma < 0.125 * (tu[-1] - tu[0]):
        raise ReductionError(
            f"Kwee-van Woerden: the extremum is not defined by the data (error {sigma:.3g} d, more than an "
            "eighth of the time span)"
        )
    asym = s_min / s_noise if s_noise > 0 else math.nan
    p_asym = math.nan
    if math.isfinite(asym):
        from scipy.special import gammaincc

        p_asym = float(gammaincc(0.5 * (z - 1.0), 0.5 * (z - 1.0) * asym))  # chi-square survival function
    return KweeVanWoerden(
        time=float(t_first + grid[c] - b / (2.0 * a)),
        err=float(sigma),
        n_pairs=float(z),
        n_grid_pairs=int(n_pairs),
        grid_step=float(dt),
        trial_spacing=float(h),
        s_min=float(s_min),
        curvature=float(a),
        n_points=int(t.size),
        s_noise=float(s_noise),
        asymmetry=float(asym),
        asymmetry_pvalue=p_asym,
    )


# --------------------------------------------------------------------------- symmetric polynomial


@dataclass(frozen=True)
class SymmetricFit:
    """Time of an extremum from a symmetric polynomial fit.

    Model ``m(t) = sum_k c_k (t - t0)^(2k)``, k = 0..n_terms-1.

    Attributes
    ----------
    time, err
        t0 and its bootstrap standard error (days).
    formal_err
        Error from the fit's covariance (scaled by chi2/dof when above 1), for
        comparison.
    n_terms
        Number of even terms, chosen by the Bayesian information criterion.
    coefficients
        ``c_k`` in mag / day^(2k).
    chi2, dof
        Of the best fit.
    n_boot, n_boot_used
        Bootstrap resamples asked for and converged.
    n_points
        Observations used.
    """

    time: float
    err: float
    formal_err: float
    n_terms: int
    coefficients: tuple[float, ...]
    chi2: float
    dof: int
    n_boot: int
    n_boot_used: int
    n_points: int
    method: str = "symmetric-polynomial"

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "method": self.method,
            "time": float(self.time),
            "err": _jf(self.err),
            "formal_err": _jf(self.formal_err),
            "n_terms": int(self.n_terms),
            "coefficients": [float(c) for c in self.coefficients],
            "chi2": float(self.chi2),
            "dof": int(self.dof),
            "n_boot": int(self.n_boot),
            "n_boot_used": int(self.n_boot_used),
            "n_points": int(self.n_points),
        }


def _sym_model(p: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Model and Jacobian of ``sum_k c_k (v - x0)^(2k)``; p = [x0, c_0, ...], batched over p's leading axes."""
    x0 = p[..., 0, None]
    coef = p[..., 1:]
    u = v - x0
    u2 = u * u
    nt = coef.shape[-1]
    powers = np.stack([u2**k for k in range(nt)], axis=-1)  # (..., n, nt)
    model = np.einsum("...nk,...k->...n", powers, coef)
    dpow = np.stack([np.zeros_like(u)] + [2.0 * k * u * u2 ** (k - 1) for k in range(1, nt)], axis=-1)
    dx0 = -np.einsum("...nk,...k->...n", dpow, coef)
    return model, np.concatenate([dx0[..., None], powers], axis=-1)


def _sym_start(v: np.ndarray, y: np.ndarray, w: np.ndarray, nt: int, extra: float | None) -> np.ndarray:
    """Best start by scanning x0 over the middle 60% of the data (linear in the c_k at fixed x0)."""
    lo, hi = v.min(), v.max()
    xs = np.linspace(lo + 0.2 * (hi - lo), hi - 0.2 * (hi - lo), 61)
    if extra is not None:
        xs = np.append(xs, extra)
    u2 = (v[None, :] - xs[:, None]) ** 2
    a = np.stack([u2**k for k in range(nt)], axis=-1) * w[None, :, None]
    q, r = np.linalg.qr(a)
    coef = np.linalg.solve(r, np.einsum("xnk,n->xk", q, y * w)[..., None])[..., 0]
    chi2 = np.sum((np.einsum("xnk,xk->xn", a, coef) - y * w) ** 2, axis=1)
    i = int(np.argmin(chi2))
    return np.concatenate([[xs[i]], coef[i]])


def _refit_resamples(p: np.ndarray, v: np.ndarray, w: np.ndarray, y_b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Newton refits of many resamples at once, started from the best fit ``p``.

    Returns the fitted centres (scaled units) and which resamples converged
    with their centre inside the data.
    """
    pb = np.tile(p, (y_b.shape[0], 1))
    ok = np.ones(y_b.shape[0], dtype=bool)
    step = np.zeros_like(pb)
    for _ in range(60):
        mb, jb = _sym_model(pb, v)
        jb = jb * w[None, :, None]
        r = (y_b - mb) * w[None, :]
        with np.errstate(all="ignore"):
            q, rr = np.linalg.qr(jb)
            step = np.linalg.solve(rr, np.einsum("bnk,bn->bk", q, r)[..., None])[..., 0]
        bad = ~np.all(np.isfinite(step), axis=1)
        step[bad] = 0.0
        ok &= ~bad
        pb += step
        if np.max(np.abs(step[ok, 0]), initial=0.0) < 1e-10:
            break
    ok &= np.abs(step[:, 0]) < 1e-8
    ok &= (pb[:, 0] >= v.min()) & (pb[:, 0] <= v.max())
    return pb[:, 0], ok


def symmetric_fit(
    t: Any,
    mag: Any,
    mag_err: Any,
    *,
    rng: np.random.Generator,
    n_boot: int = 200,
    t0_guess: float | None = None,
    max_terms: int = 6,
) -> SymmetricFit:
    """Time of an extremum from a polynomial in ``(t - t0)^2``, with a bootstrap error.

    The model ``c_0 + c_1 u^2 + c_2 u^4 + ...`` (u = t - t0) is symmetric about
    t0 and non-linear only in t0.  It is fitted by weighted least squares
    (:func:`scipy.optimize.least_squares`, Levenberg-Marquardt) for 3 to
    ``max_terms`` even terms, and the number of terms with the smallest
    Bayesian information criterion ``chi2 + (n_terms + 1) ln N`` is kept (a
    quartic suffices near the bottom of a minimum; flat shoulders of an eclipse
    need more).  Works for minima and maxima alike.

    Error: residual bootstrap.  The standardised residuals ``(y - model)/err``,
    centred and inflated by ``sqrt(N / (N - p))`` for the fitted parameters,
    are resampled with replacement onto the best model, and each resample is
    refitted (same number of terms).  Model misfit is resampled as if it were
    noise, which makes the error conservative rather than optimistic.  The
    resamples are refitted by a Gauss-Newton iteration vectorised over all
    resamples, started from the best fit (written here because one
    ``least_squares`` call per resample would cost ~20x more); resamples that
    do not converge, or whose t0 leaves the data, are dropped and counted.

    Parameters
    ----------
    t, mag, mag_err
        One extremum (days, mag, mag).
    rng
        Random generator for the bootstrap.
    n_boot
        Number of resamples (>= 20).
    t0_guess
        Optional starting time (e.g. from :func:`kwee_van_woerden`), added to
        the scan of starting values.
    max_terms
        Largest number of even terms tried (3..8).
    """
    if not isinstance(rng, np.random.Generator):
        raise InputError("symmetric_fit: rng must be a numpy.random.Generator (e.g. numpy.random.default_rng(seed))")
    if n_boot < 20:
        raise InputError(f"symmetric_fit: n_boot must be at least 20, got {n_boot}")
    if not 3 <= max_terms <= 8:
        raise InputError(f"symmetric_fit: max_terms must be between 3 and 8, got {max_terms}")
    t, y, dy = _series(t, mag, mag_err, what="symmetric fit", min_points=7)
    from scipy.optimize import least_squares

    n = t.size
    t_ref = 0.5 * (t[0] + t[-1])
    scale = 0.5 * (t[-1] - t[0])
    if not scale > 0:
        raise InputError("symmetric fit: all times are equal")
    v = (t - t_ref) / scale
    w = 1.0 / dy
    guess = None if t0_guess is None else (float(t0_guess) - t_ref) / scale
    best = None
    for nt in range(3, max_terms + 1):
        if n < nt + 3:
            break
        p0 = _sym_start(v, y, w, nt, guess)
        res = least_squares(
            lambda p: (_sym_model(p, v)[0] - y) * w,
            p0,
            jac=lambda p: _sym_model(p, v)[1] * w[:, None],
            method="lm",
        )
        chi2 = float(2.0 * res.cost)
        bic = chi2 + (nt + 1) * math.log(n)
        if v.min() <= res.x[0] <= v.max() and (best is None or bic < best[0]):
            best = (bic, nt, res.x, chi2)
    if best is None:
        raise ReductionError("symmetric fit: no fit with its centre inside the data")
    _, nt, p, chi2 = best
    model, jac = _sym_model(p, v)
    npar = nt + 1
    dof = n - npar
    # Direction of the extremum: the model's centre must be more extreme than its ends.
    centre = _sym_model(p, np.array([p[0]]))[0][0]
    ends = model[[0, -1]]
    if not (np.all(centre > ends) or np.all(centre < ends)):
        raise ReductionError("symmetric fit: the fitted curve has no extremum inside the data")
    jw = jac * w[:, None]
    try:
        cov = np.linalg.inv(jw.T @ jw) * max(1.0, chi2 / dof)
        formal = sd(cov[0, 0]) * scale
    except np.linalg.LinAlgError:
        formal = math.nan
    z = (y - model) * w
    z = (z - z.mean()) * math.sqrt(n / dof)
    idx = rng.integers(0, n, size=(n_boot, n))
    # Resamples are refitted in batches so that memory stays at a few MB for long nights.
    batch = max(8, 40_000 // n)
    x0_boot, ok = np.empty(n_boot), np.empty(n_boot, dtype=bool)
    for start in range(0, n_boot, batch):
        sl = slice(start, min(start + batch, n_boot))
        x0_boot[sl], ok[sl] = _refit_resamples(p, v, w, model + dy * z[idx[sl]])
    used = int(ok.sum())
    if used < max(10, n_boot // 2):
        raise ReductionError(
            f"symmetric fit: only {used} of {n_boot} bootstrap resamples converged; the extremum is poorly defined"
        )
    err = float(np.std(x0_boot[ok], ddof=1) * scale)
    coef = tuple(float(c / scale ** (2 * k)) for k, c in enumerate(p[1:]))
    return SymmetricFit(
        time=float(t_ref + p[0] * scale),
        err=err,
        formal_err=float(formal),
        n_terms=int(nt),
        coefficients=coef,
        chi2=chi2,
        dof=int(dof),
        n_boot=int(n_boot),
        n_boot_used=used,
        n_points=int(n),
    )


# --------------------------------------------------------------------------- coverage


@dataclass(frozen=True)
class Coverage:
    """Whether one night covers a predicted extremum well enough to time it.

    Attributes
    ----------
    covered
        True when every rule passes.
    reason
        Why not (empty when covered).
    predicted_bjd_tdb
        The predicted time.
    window_start, window_end
        The window searched, ``predicted -+ half width``.
    t_extreme
        Time of the data's extremum (see :func:`check_coverage`; NaN if none).
    fit_start, fit_end
        The stretch symmetric about ``t_extreme`` that the estimators use
        (as long as the shorter branch).
    n_before, n_after
        Points before and after ``t_extreme`` in that stretch.
    rise_before, rise_after
        How far the smoothed light curve departs from the extremum on each
        branch (mag, positive).
    noise
        Median magnitude error in the window (mag).
    depth
        Larger of the two rises: the depth (or height) seen in the window, a
        lower bound of the full amplitude when the window ends inside the
        eclipse.
    """

    covered: bool
    reason: str
    predicted_bjd_tdb: float
    window_start: float
    window_end: float
    t_extreme: float = math.nan
    fit_start: float = math.nan
    fit_end: float = math.nan
    n_before: int = 0
    n_after: int = 0
    rise_before: float = math.nan
    rise_after: float = math.nan
    noise: float = math.nan
    depth: float = math.nan

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "covered": bool(self.covered),
            "reason": self.reason,
            "predicted_bjd_tdb": float(self.predicted_bjd_tdb),
            "window_start": float(self.window_start),
            "window_end": float(self.window_end),
            "t_extreme": _jf(self.t_extreme),
            "fit_start": _jf(self.fit_start),
            "fit_end": _jf(self.fit_end),
            "n_before": int(self.n_before),
            "n_after": int(self.n_after),
            "rise_before": _jf(self.rise_before),
            "rise_after": _jf(self.rise_after),
            "noise": _jf(self.noise),
            "depth": _jf(self.depth),
        }


def _branch_names(kind: str) -> tuple[str, str]:
    # Before a minimum of light the star fades (descending branch), after it
    # brightens (ascending branch); the other way round for a maximum.
    return ("descending", "ascending") if kind == "minimum" else ("ascending", "descending")


def check_coverage(
    t: Any,
    mag: Any,
    mag_err: Any,
    predicted_bjd_tdb: float,
    period: float,
    *,
    kind: str = "minimum",
    window_fraction: float = 0.1,
    half_window_d: float | None = None,
    min_branch_points: int = 5,
    min_rise_sigma: float = 3.0,
    max_gap_fraction: float = 0.25,
) -> Coverage:
    """Decide whether a night covers a predicted extremum (rules of our own; common practice in spirit).

    The window is ``predicted -+ window_fraction * period`` (or
    ``-+ half_window_d``).  Inside it the magnitudes are smoothed by a running
    median of 5; the data's extremum is the middle of the smoothed points
    within the median magnitude error (at most a quarter of the range) of the
    most extreme one (faintest for a minimum, brightest for a maximum).  The estimators
    then use the stretch symmetric about it, as long as the shorter branch.
    Rules, in the order checked (the first that fails is the reason):

    1. some data in the window;
    2. at least ``2 * min_branch_points + 1`` points in it;
    3. at least ``min_branch_points`` points on each branch (an extremum at
       the window's edge fails here: the minimum may lie outside the data),
       and as many within the stretch symmetric about the extremum;
    4. no gap wider than ``max_gap_fraction`` of the half window on either
       side of the extremum;
    5. on each branch the smoothed curve departs from the extremum by at least
       ``min_rise_sigma`` times the median magnitude error (otherwise the data
       show no extremum there).

    Parameters
    ----------
    t, mag, mag_err
        One night of one band (BJD_TDB, mag, mag).
    predicted_bjd_tdb
        The predicted time of the extremum.
    period
        Period (days), to size the window.
    kind
        ``"minimum"`` or ``"maximum"`` (of light).
    """
    _check_kind(kind)
    if not (math.isfinite(period) and period > 0):
        raise InputError(f"check_coverage: period must be positive, got {period}")
    t, mag, err = _series(t, mag, mag_err, what="coverage", min_points=0)
    h = float(half_window_d) if half_window_d is not None else window_fraction * period
    if not (math.isfinite(h) and h > 0):
        raise InputError(f"check_coverage: the half window must be positive, got {h}")
    if min_branch_points < 2:
        raise InputError(f"check_coverage: min_branch_points must be at least 2, got {min_branch_points}")
    p = float(predicted_bjd_tdb)
    base = {"predicted_bjd_tdb": p, "window_start": p - h, "window_end": p + h}
    hours = h * 24.0
    sel = np.abs(t - p) <= h
    n = int(sel.sum())
    m = int(min_branch_points)
    before_name, after_name = _branch_names(kind)
    what = f"the predicted {kind} at BJD_TDB {p:.5f}"
    if n == 0:
        return Coverage(False, f"no data within {hours:.2f} h of {what}", **base)
    if n < 2 * m + 1:
        return Coverage(False, f"too few points: {n} within {hours:.2f} h of {what}, need {2 * m + 1}", **base)
    tw, yw, ew = t[sel], mag[sel], err[sel]
    from scipy.ndimage import median_filter

    smooth = median_filter(yw, size=min(5, n), mode="nearest")
    sign = 1.0 if kind == "minimum" else -1.0
    ext = sign * smooth
    noise = float(np.median(ew))
    # Centre of the extremum: middle of the points whose smoothed magnitude is
    # within the typical error (at most a quarter of the range) of the most
    # extreme one, so that a flat-bottomed (total) eclipse is centred on its
    # bottom, not on a noise dip.
    tol = min(noise, 0.25 * float(ext.max() - ext.min()))
    near = np.flatnonzero(ext >= ext.max() - tol)
    te = 0.5 * float(tw[near[0]] + tw[near[-1]])
    i = int(np.argmin(np.abs(tw - te)))
    half = float(min(te - tw[0], tw[-1] - te))
    inner = np.abs(tw - te) <= half
    n_before = int(np.count_nonzero(inner & (tw < te)))
    n_after = int(np.count_nonzero(inner & (tw > te)))
    info = dict(base, t_extreme=te, fit_start=te - half, fit_end=te + half, n_before=n_before, n_after=n_after,
                noise=noise)
    extreme_word = "faintest" if kind == "minimum" else "brightest"
    raw = ((before_name, i, "before", "first", "before the night's data"),
           (after_name, n - 1 - i, "after", "last", "after the night's data"))
    for name, count, side, which, where in raw:
        if count < m:
            hint = f" (the {extreme_word} point is the {which} in the window: the {kind} may lie {where})" if count == 0 else ""
            return Coverage(False, f"{name} branch missing: {count} points {side} the {kind}, need {m}{hint}", **info)
    for name, count, side in ((before_name, n_before, "before"), (after_name, n_after, "after")):
        if count < m:
            return Coverage(
                False,
                f"{name} branch too short: {count} points {side} the {kind} within {half * 1440.0:.0f} min "
                f"(the reach of the shorter branch), need {m}",
                **info,
            )
    gap = max(tw[i] - tw[i - 1], tw[i + 1] - tw[i])
    if gap > max_gap_fraction * h:
        return Coverage(
            False,
            f"gap of {gap * 1440.0:.0f} min at the {kind} (more than {max_gap_fraction:g} of the "
            f"{hours:.2f} h half window); its time cannot be interpolated",
            **info,
        )
    rise_before = float(np.max(ext[i] - ext[:i][inner[:i]]))
    rise_after = float(np.max(ext[i] - ext[i + 1 :][inner[i + 1 :]]))
    info.update(rise_before=rise_before, rise_after=rise_after, depth=max(rise_before, rise_after))
    need = min_rise_sigma * noise
    for name, rise, side in ((before_name, rise_before, "before"), (after_name, rise_after, "after")):
        if rise < need:
            return Coverage(
                False,
                f"{name} branch too shallow: the light changes by {rise:.3f} mag {side} the {kind}, need "
                f"{need:.3f} mag ({min_rise_sigma:g} x the typical error {noise:.3f} mag)",
                **info,
            )
    return Coverage(True, "", **info)


# --------------------------------------------------------------------------- timings of a night


@dataclass(frozen=True)
class TemplateFit:
    """Time of an extremum from the star's own mean light curve shifted in time.

    Attributes
    ----------
    time, err
        Fitted time of the template's extremum (BJD_TDB) and its 1-sigma error from the
        least-squares covariance, scaled by the reduced chi-square when that exceeds 1.
    offset, scale
        Magnitude offset and amplitude factor of the fitted template.
    chi2, dof, n_points
    method
        ``"mean-curve template"``.
    """

    time: float
    err: float
    offset: float
    scale: float
    chi2: float
    dof: int
    n_points: int
    method: str = "mean-curve template"

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {"method": self.method, "time": float(self.time), "err": _jf(self.err), "offset": _jf(self.offset),
                "scale": _jf(self.scale), "chi2": _jf(self.chi2), "dof": int(self.dof), "n_points": int(self.n_points)}


def template_fit(t: Any, mag: Any, mag_err: Any, template: Any, t_guess: float, *, max_shift: float) -> TemplateFit:
    """Fit ``mag = offset + scale * template(t - t0)`` for ``t0``, ``offset`` and ``scale``.

    ``template(x)`` is the star's mean light curve (magnitudes) as a function of the
    time ``x`` from its extremum, e.g. a harmonic fit of all the star's data.  Unlike
    :func:`kwee_van_woerden` and :func:`symmetric_fit` this does not assume a symmetric
    extremum, so it suits the asymmetric maxima of pulsating stars (a steep rise and a
    slow decline), where a symmetric method times the centre of symmetry instead
    (common practice: timings of pulsators from a fitted mean curve).  The shift is
    searched within ``t_guess +- max_shift`` (days).
    """
    from scipy.optimize import least_squares

    t, mag, err = _series(t, mag, mag_err, what="template fit", min_points=4)
    w = 1.0 / err
    tt = t - t_guess
    if not callable(template):
        raise InputError("template fit: 'template' must be a function of the time from the extremum")
    # start: best shift on a grid (the least-squares surface can have side minima)
    grid = np.linspace(-max_shift, max_shift, 41)
    best = None
    for g in grid:
        m = np.asarray(template(tt - g), dtype=float)
        a = np.vstack([np.ones_like(m), m]).T * w[:, None]
        coef, *_ = np.linalg.lstsq(a, mag * w, rcond=None)
        r = float(np.sum((a @ coef - mag * w) ** 2))
        if best is None or r < best[0]:
            best = (r, g, coef)
    _, g0, (c0, s0) = best
    x0 = np.array([g0, c0, s0])

    def resid(p):
        return (p[1] + p[2] * np.asarray(template(tt - p[0]), dtype=float) - mag) * w

    sol = least_squares(resid, x0, x_scale=np.array([max(max_shift, 1e-6) / 10, 0.01, 0.1]), method="lm")
    dof = t.size - 3
    if dof < 1 or not sol.success:
        raise ReductionError(f"template fit: no solution ({sol.message if not sol.success else 'too few points'})")
    chi2 = float(np.sum(sol.fun**2))
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac)
    except np.linalg.LinAlgError:
        raise ReductionError("template fit: the shift is not constrained by these points") from None
    cov *= max(1.0, chi2 / dof)
    shift = float(sol.x[0])
    if abs(shift) > 1.5 * max_shift or not math.isfinite(cov[0, 0]) or sol.x[2] <= 0:
        raise ReductionError("template fit: the fitted shift left the window or the template came out inverted")
    return TemplateFit(t_guess + shift, sd(cov[0, 0]), float(sol.x[1]), float(sol.x[2]), chi2, dof, int(t.size))


@dataclass(frozen=True)
class Timing:
    """One measured time of an extremum.

    Attributes
    ----------
    bjd_tdb, err
        The main estimate and its standard error (days): Kwee & van Woerden, or for a
        maximum with a template the mean-curve template fit.
    method
        ``"kwee-van-woerden"`` or ``"mean-curve template"``.
    band, night
        Where it comes from.
    type
        ``"primary"``, ``"secondary"`` or ``"maximum"``.
    cycle
        E (half-integer for a secondary minimum).
    o_minus_c
        Observed minus the ephemeris' time for E (days).
    predicted_bjd_tdb
        The ephemeris' time for E.
    second_method, second_bjd_tdb, second_err
        The independent estimate (symmetric polynomial, or Kwee & van Woerden beside a
        template fit; NaN if it failed).
    disagree
        ``|bjd_tdb - second_bjd_tdb| > DISAGREE_SIGMA * sqrt(err^2 + second_err^2)``.
        Both estimates use the same points, so their difference scatters less
        than ``sqrt(err^2 + second_err^2)``: a flag is a real warning
        (asymmetric extremum, outliers, trends), not a 1-in-370 fluctuation.
    n_points
        Points used by the estimators.
    n_pairs
        Kwee & van Woerden's effective Z.
    asymmetry
        Kwee & van Woerden's S_min over what the magnitude errors explain (~1
        for a symmetric extremum; see :class:`KweeVanWoerden`).  A note is
        added when its p-value is below ``ASYMMETRY_PVALUE``.
    depth
        Depth (minimum) or height (maximum) of the extremum seen in the window (mag).
    note
        Anything the reader should know (empty otherwise).
    """

    bjd_tdb: float
    err: float
    method: str
    band: str
    night: str
    type: str
    cycle: float
    o_minus_c: float
    predicted_bjd_tdb: float
    second_method: str
    second_bjd_tdb: float
    second_err: float
    disagree: bool
    n_points: int
    n_pairs: float
    asymmetry: float
    depth: float
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "bjd_tdb": float(self.bjd_tdb),
            "err": _jf(self.err),
            "method": self.method,
            "band": self.band,
            "night": self.night,
            "type": self.type,
            "cycle": float(self.cycle),
            "o_minus_c": float(self.o_minus_c),
            "predicted_bjd_tdb": float(self.predicted_bjd_tdb),
            "second_method": self.second_method,
            "second_bjd_tdb": _jf(self.second_bjd_tdb),
            "second_err": _jf(self.second_err),
            "disagree": bool(self.disagree),
            "n_points": int(self.n_points),
            "n_pairs": _jf(self.n_pairs),
            "asymmetry": _jf(self.asymmetry),
            "depth": _jf(self.depth),
            "note": self.note,
        }


@dataclass(frozen=True)
class Refusal:
    """A predicted extremum of a night that could not be timed, and why."""

    night: str
    band: str
    predicted_bjd_tdb: float
    type: str
    cycle: float
    reason: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "night": self.night,
            "band": self.band,
            "predicted_bjd_tdb": float(self.predicted_bjd_tdb),
            "type": self.type,
            "cycle": float(self.cycle),
            "reason": self.reason,
        }


def find_timings(
    t: Any,
    mag: Any,
    mag_err: Any,
    night: str,
    band: str,
    ephemeris: Ephemeris,
    kind: str | None = None,
    *,
    rng: np.random.Generator,
    secondary: bool = True,
    window_fraction: float = 0.1,
    min_branch_points: int = 5,
    min_rise_sigma: float = 3.0,
    n_boot: int = 200,
    disagree_sigma: float = DISAGREE_SIGMA,
    template: Any = None,
) -> tuple[list[Timing], list[Refusal]]:
    """Time every predicted extremum of ``kind`` inside one night's data.

    For each predicted extremum (primary and, with ``secondary``, secondary
    minima for an ephemeris of minima) between the first and last point:
    :func:`check_coverage` decides; if covered, :func:`kwee_van_woerden` gives
    the time and :func:`symmetric_fit` the independent second estimate on the
    same points (the stretch symmetric about the data's extremum).  The type
    comes from the ephemeris phase (integer cycle: primary, half-integer:
    secondary).

    Parameters
    ----------
    t, mag, mag_err
        One night of one band (BJD_TDB, mag, mag).
    night, band
        Labels carried into the results.
    ephemeris
        Predicts the extrema.
    kind
        ``"minimum"`` or ``"maximum"``; None means the ephemeris' kind.  It
        must match the ephemeris (an ephemeris of maxima does not predict
        minima).
    rng
        Random generator for the bootstrap of the second estimate.
    secondary
        Also time the secondary minima (half-integer cycles) of an ephemeris
        of minima.
    window_fraction, min_branch_points, min_rise_sigma
        See :func:`check_coverage`.
    n_boot
        Bootstrap resamples of the second estimate.
    disagree_sigma
        Threshold of :attr:`Timing.disagree`.
    template
        For maxima: the star's mean light curve as a function of the time from its
        maximum (see :func:`template_fit`).  When given, the template fit is the main
        estimate of a maximum and Kwee & van Woerden the second: a pulsator's maximum
        is asymmetric, and a symmetric method would time the centre of symmetry.

    Returns
    -------
    (timings, refusals)
        In time order.
    """
    kind = ephemeris.kind if kind is None else _check_kind(kind)
    if kind != ephemeris.kind:
        raise InputError(
            f"times of {kind} need an ephemeris of {kind}; this ephemeris predicts {ephemeris.kind} "
            "(set kind in [ephemeris])"
        )
    if not isinstance(rng, np.random.Generator):
        raise InputError("find_timings: rng must be a numpy.random.Generator")
    t, mag, err = _series(t, mag, mag_err, what=f"night {night} band {band}", min_points=1)
    cycles, preds = predict_extrema(ephemeris, float(t[0]), float(t[-1]), secondary=secondary and kind == "minimum")
    timings: list[Timing] = []
    refusals: list[Refusal] = []
    for e, tp in zip(cycles, preds):
        kind_label = "maximum" if kind == "maximum" else ("primary" if float(e).is_integer() else "secondary")
        period_here = float(ephemeris.period_at(e))
        cov = check_coverage(
            t, mag, err, tp, period_here, kind=kind, window_fraction=window_fraction,
            min_branch_points=min_branch_points, min_rise_sigma=min_rise_sigma,
        )
        if not cov.covered:
            refusals.append(Refusal(night, band, float(tp), kind_label, float(e), cov.reason))
            continue
        use = (t >= cov.fit_start) & (t <= cov.fit_end)
        try:
            kvw = kwee_van_woerden(t[use], mag[use], err[use])
        except (ReductionError, InputError) as exc:
            refusals.append(Refusal(night, band, float(tp), kind_label, float(e), str(exc)))
            continue
        note = ""
        main_t, main_e, main_method = kvw.time, kvw.err, kvw.method
        second_method = "symmetric-polynomial"
        try:
            if template is not None and kind == "maximum":
                tf = template_fit(t[use], mag[use], err[use], template, kvw.time, max_shift=window_fraction * period_here)
                main_t, main_e, main_method = tf.time, tf.err, tf.method
                t2, e2, second_method = kvw.time, kvw.err, kvw.method
            else:
                sym = symmetric_fit(t[use], mag[use], err[use], rng=rng, n_boot=n_boot, t0_guess=kvw.time)
                t2, e2 = sym.time, sym.err
            disagree = abs(main_t - t2) > disagree_sigma * math.hypot(main_e, e2)
        except (ReductionError, InputError) as exc:
            t2, e2, disagree = math.nan, math.nan, False
            note = f"no second estimate: {exc}"
        if disagree:
            note = (
                f"the two estimates differ by {abs(main_t - t2) * 1440.0:.1f} min, more than {disagree_sigma:g} "
                "combined errors: the extremum may be asymmetric or the data disturbed"
            )
        if kvw.asymmetry_pvalue < ASYMMETRY_PVALUE:
            if main_method == kvw.method:
                text = (f"the branches are not mirror images (S_min is {kvw.asymmetry:.1f} times what the magnitude "
                        "errors explain): a symmetric method times the centre of symmetry of the data, which can differ "
                        "from the extremum by more than the error; check the light curve or the errors")
            else:
                text = (f"the branches are not mirror images (S_min is {kvw.asymmetry:.1f} times what the errors "
                        "explain): the mean-curve template allows for that; the symmetric Kwee & van Woerden value "
                        "beside it times the centre of symmetry instead")
            note = "; ".join(x for x in (note, text) if x)
        timings.append(
            Timing(
                bjd_tdb=main_t,
                err=main_e,
                method=main_method,
                band=band,
                night=night,
                type=kind_label,
                cycle=float(e),
                o_minus_c=float(main_t - tp),
                predicted_bjd_tdb=float(tp),
                second_method=second_method,
                second_bjd_tdb=float(t2),
                second_err=float(e2),
                disagree=bool(disagree),
                n_points=int(use.sum()),
                n_pairs=kvw.n_pairs,
                asymmetry=kvw.asymmetry,
                depth=cov.depth,
                note=note,
            )
        )
    return timings, refusals


# --------------------------------------------------------------------------- ephemeris fits


@dataclass(frozen=True)
class PolynomialEphemeris:
    """One weighted least-squares fit ``T = T0 + P E (+ Q E^2)``.

    Attributes
    ----------
    coefficients
        (T0, P) or (T0, P, Q), days.
    errors
        Their standard errors (covariance scaled, see :func:`fit_ephemeris`).
    covariance
        Scaled covariance matrix.
    chi2, dof
        Weighted chi-square and degrees of freedom.
    error_scale
        ``sqrt(max(1, chi2/dof))``, the factor applied to the formal errors.
    """

    coefficients: tuple[float, ...]
    errors: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    chi2: float
    dof: int
    error_scale: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        names = ("epoch", "period", "quadratic")[: len(self.coefficients)]
        out: dict[str, Any] = {}
        for name, c, e in zip(names, self.coefficients, self.errors):
            out[name] = float(c)
            out[f"{name}_err"] = _jf(e)
        out.update(
            covariance=[[_jf(x) for x in row] for row in self.covariance],
            chi2=float(self.chi2),
            dof=int(self.dof),
            error_scale=float(self.error_scale),
        )
        return out


@dataclass(frozen=True)
class EphemerisFit:
    """Linear and quadratic ephemerides fitted to timings, and the chosen one.

    Attributes
    ----------
    model
        ``"linear"`` or ``"quadratic"``: the one the top-level numbers describe.
    epoch, period, quadratic, epoch_err, period_err, quadratic_err
        Of the chosen model (quadratic 0 and its error NaN for the linear one).
    chi2, dof
        Of the chosen model.
    linear, quadratic_fit
        Both fits (``quadratic_fit`` None with fewer than 3 timings).
    f_statistic, f_pvalue
        F-test of the quadratic term, ``F = (chi2_lin - chi2_quad) / (chi2_quad / (N - 3))``
        against F(1, N - 3) (NaN with fewer than 4 timings).
    alpha
        Significance level of the test.
    quadratic_significant
        ``f_pvalue < alpha``.
    dp_de, dp_de_err
        ``2 Q`` from the quadratic fit (days per cycle).
    dp_dt, dp_dt_err
        ``2 Q / P`` (dimensionless, days per day).
    dp_dt_s_per_yr, dp_dt_s_per_yr_err
        The same in seconds per Julian year.
    note
        Says when the quadratic term is not significant (the period change is
        then not established) or could not be tested.
    kind
        Kind of the timings (minimum or maximum).
    n_timings
        Number of timings.
    residuals
        O - C of each timing against the chosen model (days).
    """

    model: str
    epoch: float
    period: float
    quadratic: float
    epoch_err: float
    period_err: float
    quadratic_err: float
    chi2: float
    dof: int
    linear: PolynomialEphemeris
    quadratic_fit: PolynomialEphemeris | None
    f_statistic: float
    f_pvalue: float
    alpha: float
    quadratic_significant: bool
    dp_de: float
    dp_de_err: float
    dp_dt: float
    dp_dt_err: float
    dp_dt_s_per_yr: float
    dp_dt_s_per_yr_err: float
    note: str
    kind: str
    n_timings: int
    residuals: tuple[float, ...] = field(default=())

    def to_ephemeris(self) -> Ephemeris:
        """The chosen ephemeris, with its errors."""
        return Ephemeris(
            epoch=self.epoch,
            period=self.period,
            quadratic=self.quadratic,
            kind=self.kind,
            epoch_err=self.epoch_err,
            period_err=self.period_err,
            quadratic_err=self.quadratic_err,
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict."""
        return {
            "model": self.model,
            "kind": self.kind,
            "n_timings": int(self.n_timings),
            "epoch": float(self.epoch),
            "period": float(self.period),
            "quadratic": float(self.quadratic),
            "epoch_err": _jf(self.epoch_err),
            "period_err": _jf(self.period_err),
            "quadratic_err": _jf(self.quadratic_err),
            "chi2": float(self.chi2),
            "dof": int(self.dof),
            "linear": self.linear.to_dict(),
            "quadratic_fit": None if self.quadratic_fit is None else self.quadratic_fit.to_dict(),
            "f_statistic": _jf(self.f_statistic),
            "f_pvalue": _jf(self.f_pvalue),
            "alpha": float(self.alpha),
            "quadratic_significant": bool(self.quadratic_significant),
            "dp_de": _jf(self.dp_de),
            "dp_de_err": _jf(self.dp_de_err),
            "dp_dt": _jf(self.dp_dt),
            "dp_dt_err": _jf(self.dp_dt_err),
            "dp_dt_s_per_yr": _jf(self.dp_dt_s_per_yr),
            "dp_dt_s_per_yr_err": _jf(self.dp_dt_s_per_yr_err),
            "note": self.note,
            "residuals": [float(r) for r in self.residuals],
        }


def _wls(e: np.ndarray, t: np.ndarray, w: np.ndarray, degree: int) -> tuple[PolynomialEphemeris, np.ndarray]:
    """Weighted polynomial least squares in E; returns the fit and the model times.

    Solved in scaled, shifted variables (E / max|E|, t - t_ref) for conditioning
    and transformed back exactly.  Covariance ``(X^T W X)^-1`` times
    ``max(1, chi2/dof)``: errors are inflated when the scatter exceeds the
    stated errors but never shrunk below them (with few timings chi2/dof
    fluctuates a lot, and a lucky small value should not promise more than the
    timings' own errors give).  With dof = 0 the formal errors are kept.
    """
    t_ref = float(np.average(t, weights=w))
    s = float(max(np.max(np.abs(e)), 1.0))
    x = np.stack([(e / s) ** k for k in range(degree + 1)], axis=1)
    sw = np.sqrt(w)
    coef_s, *_ = np.linalg.lstsq(x * sw[:, None], (t - t_ref) * sw, rcond=None)
    resid = (t - t_ref) - x @ coef_s
    chi2 = float(np.sum(w * resid**2))
    dof = int(t.size - (degree + 1))
    cov_s = np.linalg.inv((x * w[:, None]).T @ x)
    factor = max(1.0, chi2 / dof) if dof > 0 else 1.0
    scale = np.array([s**-k for k in range(degree + 1)])
    coef = coef_s * scale
    coef[0] += t_ref
    cov = cov_s * np.outer(scale, scale) * factor
    fit = PolynomialEphemeris(
        coefficients=tuple(float(c) for c in coef),
        errors=tuple(sd(cov[i, i]) for i in range(degree + 1)),
        covariance=tuple(tuple(float(v) for v in row) for row in cov),
        chi2=chi2,
        dof=dof,
        error_scale=math.sqrt(factor),
    )
    return fit, t_ref + x @ coef_s


def fit_ephemeris(
    cycles: Any,
    times: Any,
    errs: Any,
    *,
    quadratic: bool | Literal["auto"] = "auto",
    kind: str = "minimum",
    alpha: float = 0.01,
) -> EphemerisFit:
    """Fit a linear and a quadratic ephemeris to timings by weighted least squares.

    ``T(E) = T0 + P E + Q E^2`` (REFERENCES.md "Timings"): dP/dE = 2Q and
    dP/dt = 2Q/P.  Weights are ``1/err^2``; the covariance is scaled by the
    reduced chi-square when it exceeds 1 (see :func:`_wls`).

    Parameters
    ----------
    cycles
        E of each timing (integers, or half-integers for secondaries).
    times, errs
        BJD_TDB and standard errors (days, positive).
    quadratic
        True: report the quadratic ephemeris; False: the linear one; ``"auto"``:
        the quadratic one only when its term is significant by the F-test.
    kind
        Kind of the timings, carried into :meth:`EphemerisFit.to_ephemeris`.
    alpha
        Significance level of the F-test (default 0.01: a period change is a
        claim worth a strict test).

    Raises
    ------
    InputError
        Fewer than 2 timings (3 for ``quadratic=True``) or too few distinct
        cycles, bad values.
    """
    _check_kind(kind)
    if quadratic not in (True, False, "auto"):
        raise InputError(f"fit_ephemeris: quadratic must be True, False or 'auto', got {quadratic!r}")
    if not 0.0 < alpha < 1.0:
        raise InputError(f"fit_ephemeris: alpha must be between 0 and 1, got {alpha}")
    e = np.asarray(cycles, dtype=float)
    t = np.asarray(times, dtype=float)
    s = np.asarray(errs, dtype=float)
    if e.ndim != 1 or e.shape != t.shape or e.shape != s.shape:
        raise InputError("fit_ephemeris: cycles, times and errors must be 1-D arrays of one length")
    if not (np.all(np.isfinite(e)) and np.all(np.isfinite(t)) and np.all(np.isfinite(s))):
        raise InputError("fit_ephemeris: cycles, times and errors must all be finite")
    if np.any(s <= 0):
        raise InputError("fit_ephemeris: every timing error must be positive")
    n = e.size
    n_distinct = np.unique(e).size
    need = 3 if quadratic is True else 2
    if n < need or n_distinct < need:
        raise InputError(
            f"fit_ephemeris: {n} timings at {n_distinct} distinct cycles; a "
            f"{'quadratic' if quadratic is True else 'linear'} ephemeris needs at least {need} at {need} distinct cycles"
        )
    w = 1.0 / s**2
    lin, lin_model = _wls(e, t, w, 1)
    quad, quad_model = (None, None)
    if n_distinct >= 3:
        quad, quad_model = _wls(e, t, w, 2)
    f_stat = p_val = math.nan
    significant = False
    if quad is not None and quad.dof >= 1:
        from scipy.stats import f as f_dist

        if quad.chi2 > 0:
            f_stat = (lin.chi2 - quad.chi2) / (quad.chi2 / quad.dof)
            p_val = float(f_dist.sf(f_stat, 1, quad.dof))
        else:
            f_stat, p_val = math.inf, 0.0
        significant = bool(p_val < alpha)
    use_quad = quad is not None and (quadratic is True or (quadratic == "auto" and significant))
    if quad is not None:
        q, q_err, p0 = quad.coefficients[2], quad.errors[2], quad.coefficients[1]
        p_err = quad.errors[1]
        cov_pq = quad.covariance[1][2]
        dp_de, dp_de_err = 2.0 * q, 2.0 * q_err
        dp_dt = 2.0 * q / p0
        # Linear propagation of (P, Q) with their covariance.
        grad = np.array([-2.0 * q / p0**2, 2.0 / p0])
        cpq = np.array([[p_err**2, cov_pq], [cov_pq, q_err**2]])
        dp_dt_err = float(math.sqrt(max(grad @ cpq @ grad, 0.0)))
    else:
        dp_de = dp_de_err = dp_dt = dp_dt_err = math.nan
    per_yr = SECONDS_PER_DAY * DAYS_PER_YEAR
    if quad is None:
        note = "only two distinct cycles: no quadratic term can be fitted"
    elif math.isnan(p_val):
        note = "three timings fix a quadratic exactly: its significance cannot be tested; observe more"
    elif not significant:
        note = (
            f"the quadratic term is not significant (F-test p = {p_val:.3g} >= {alpha:g}): no period change is "
            "established; dP/dE and dP/dt are given for reference only"
        )
    else:
        note = ""
    chosen, model = (quad, quad_model) if use_quad else (lin, lin_model)
    c = chosen.coefficients
    return EphemerisFit(
        model="quadratic" if use_quad else "linear",
        epoch=c[0],
        period=c[1],
        quadratic=c[2] if use_quad else 0.0,
        epoch_err=chosen.errors[0],
        period_err=chosen.errors[1],
        quadratic_err=chosen.errors[2] if use_quad else math.nan,
        chi2=chosen.chi2,
        dof=chosen.dof,
        linear=lin,
        quadratic_fit=quad,
        f_statistic=float(f_stat),
        f_pvalue=float(p_val),
        alpha=float(alpha),
        quadratic_significant=significant,
        dp_de=float(dp_de),
        dp_de_err=float(dp_de_err),
        dp_dt=float(dp_dt),
        dp_dt_err=float(dp_dt_err),
        dp_dt_s_per_yr=float(dp_dt * per_yr),
        dp_dt_s_per_yr_err=float(dp_dt_err * per_yr),
        note=note,
        kind=kind,
        n_timings=int(n),
        residuals=tuple(float(r) for r in (t - model)),
    )

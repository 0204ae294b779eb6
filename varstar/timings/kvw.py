"""Time of a symmetric extremum by Kwee & van Woerden (1956, BAN 12, 327) (pure core).

:func:`kwee_van_woerden` reflects one branch of the light curve about trial
times and fits a parabola to the sum of squared differences S(T); it is the
``"kwee-van-woerden"`` entry of :data:`varstar.timings.estimators.ESTIMATORS`.

Kwee & van Woerden: the error
-----------------------------
The published error ``sigma**2 = (4ac - b**2) / (4 a**2 (Z - 1))`` assumes that
the ``Z`` reflected pairs are independent.  Once the light curve has been
interpolated onto an even grid they are not: an interpolated value carries
only ``(1-f)**2 + f**2`` (2/3 on average) of a point's noise variance, and a
grid finer than the data uses each observation in several pairs.  Counted
naively (``Z`` = number of grid pairs) the formula underestimates the error by
a factor ~1.25 for jittered, ~1.5 for randomly spaced times and ~1.9 on a grid
twice as fine as the data (measured in ``tests/timings/test_timings.py``).  Here ``Z`` is the
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

The method assumes a symmetric extremum.  For an asymmetric one it times the
centre of symmetry of the data, not the extremum; its S_min, compared with
what the magnitude errors explain (:attr:`KweeVanWoerden.asymmetry`), detects
that, and :func:`varstar.timings.search.find_timings` adds a note.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError, ReductionError
from ..results import Result
from .checks import series

__all__ = ["KWEE_VAN_WOERDEN", "KweeVanWoerden", "kwee_van_woerden"]

#: The method's name in results, in the archive's ``method`` column and in the estimator table.
KWEE_VAN_WOERDEN = "kwee-van-woerden"


@dataclass(frozen=True)
class KweeVanWoerden(Result):
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
    method: str = KWEE_VAN_WOERDEN


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
        t, mag = series(t, mag, what="Kwee-van Woerden", min_points=7)
        var = None
    else:
        t, mag, err = series(t, mag, mag_err, what="Kwee-van Woerden", min_points=7)
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


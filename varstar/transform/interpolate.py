"""The other band at each exposure: a sampled series evaluated at other times, with an honest error.

B and V are taken in turn, not simultaneously, so the transformation needs the
target's magnitude in the other band at each exposure time.
:func:`interpolate_series` interpolates linearly between neighbouring samples
(or extrapolates from one side next to a gap) and adds an error for the
interpolation itself; the result is an :class:`Interpolated`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.results import Result, to_dict
from varstar.transform.checks import VAR_FLOOR, as_1d, check_positive, read_only

__all__ = ["Interpolated", "interpolate_series"]

# Samples farther than this many max_gap_d from the end sample do not enter the
# slope used for extrapolation at the ends of a series.
SLOPE_WINDOW = 4.0


@dataclass(frozen=True, eq=False)
class Interpolated(Result):
    """A series evaluated at other times (see :func:`interpolate_series`).

    Attributes
    ----------
    value, err : numpy.ndarray
        Interpolated value and its total 1-sigma (NaN where not ``ok``).
    meas_err : numpy.ndarray
        Part of ``err`` from the samples' own errors.
    interp_err : numpy.ndarray
        Part of ``err`` from the interpolation itself (curvature between samples;
        at the ends the slope times the gap).
    gap_d : numpy.ndarray
        Between two samples the larger distance to them; at an end the distance
        to the nearest sample; where refused the distance to the nearest usable
        sample (inf if none).
    one_sided : numpy.ndarray
        Only one side had a sample within ``max_gap_d`` (extrapolated).
    ok : numpy.ndarray
        A value could be given.
    max_gap_d : float
        The limit used.
    """

    value: np.ndarray
    err: np.ndarray
    meas_err: np.ndarray
    interp_err: np.ndarray
    gap_d: np.ndarray
    one_sided: np.ndarray
    ok: np.ndarray
    max_gap_d: float

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe dict with the per-time arrays (NaN and inf become None)."""
        # Differs from the generic dict on purpose: the limit and the counts of
        # times and of usable times come first, so a person sees them before the arrays.
        d = to_dict(self)
        head = {"max_gap_d": float(self.max_gap_d), "n": int(self.ok.size), "n_ok": int(np.count_nonzero(self.ok))}
        return {**head, **{k: v for k, v in d.items() if k != "max_gap_d"}}


def _window_curvature(t: np.ndarray, y: np.ndarray, s2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Second derivative and its variance for every interval between neighbouring samples.

    Interval ``k`` (between samples ``k`` and ``k + 1``) gets a weighted quadratic fit
    over the four samples ``k - 1 .. k + 2`` (the window slides inwards at the ends);
    with three samples the quadratic through them; with fewer, zero (unknown).
    """
    n = t.size
    n_int = max(n - 1, 0)
    if n < 3:
        return np.zeros(n_int), np.zeros(n_int)
    m = min(4, n)
    k = np.arange(n_int)
    start = np.clip(k - 1, 0, n - m)
    ii = start[:, None] + np.arange(m)[None, :]
    tw, yw, ww = t[ii], y[ii], 1.0 / np.maximum(s2[ii], VAR_FLOOR)
    tc = tw.mean(axis=1, keepdims=True)
    hw = 0.5 * np.ptp(tw, axis=1, keepdims=True)
    good = hw[:, 0] > 0
    hw = np.where(hw > 0, hw, 1.0)
    u = (tw - tc) / hw
    A = np.stack([np.ones_like(u), u, u * u], axis=2)  # (n_int, m, 3)
    N = np.einsum("kmi,km,kmj->kij", A, ww, A)
    b = np.einsum("kmi,km,km->ki", A, ww, yw)
    # a window with repeated times can be singular: regularise only those
    bad = ~good | (np.abs(np.linalg.det(N)) <= 1e-300)
    N[bad] = np.eye(3)
    b[bad] = 0.0
    Ninv = np.linalg.inv(N)
    coef = np.einsum("kij,kj->ki", Ninv, b)
    scale = 2.0 / hw[:, 0] ** 2
    ypp = np.where(bad, 0.0, coef[:, 2] * scale)
    var = np.where(bad, 0.0, Ninv[:, 2, 2] * scale**2)
    return ypp, var


def _curvature_at_samples(curv: np.ndarray, n: int) -> np.ndarray:
    """Curvature at each of ``n`` samples, for extrapolation: the larger of the two intervals beside it."""
    if n < 2:
        return np.zeros(1)
    if n == 2:
        return np.repeat(curv, 2)
    return np.concatenate([curv[:1], np.maximum(curv[:-1], curv[1:]), curv[-1:]])


def _end_slopes(t: np.ndarray, s2: np.ndarray, window: float) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least-squares slope coefficients at every sample, backwards and forwards.

    Returns ``(back, fwd)``, each ``(n, 3)``: the slope at sample ``k`` is
    ``sum_j back[k, j] y[k - 2 + j]`` (from samples ``k - 2 .. k``) or
    ``sum_j fwd[k, j] y[k + j]`` (from ``k .. k + 2``), using only samples within
    ``window`` of sample ``k``; all-zero rows where fewer than two samples qualify.
    """
    n = t.size
    out = []
    for offsets in (np.array([-2, -1, 0]), np.array([0, 1, 2])):
        ii = np.arange(n)[:, None] + offsets[None, :]
        inside = (ii >= 0) & (ii < n)
        iic = np.clip(ii, 0, max(n - 1, 0))
        tw = t[iic]
        valid = inside & (np.abs(tw - t[:, None]) <= window)
        w = np.where(valid, 1.0 / np.maximum(s2[iic], VAR_FLOOR), 0.0)
        sw = w.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            tm = np.where(sw > 0, (w * tw).sum(axis=1, keepdims=True) / sw, 0.0)
            sxx = (w * (tw - tm) ** 2).sum(axis=1, keepdims=True)
            coef = np.where(sxx > 0, w * (tw - tm) / sxx, 0.0)
        enough = (valid.sum(axis=1) >= 2)[:, None] & (sxx > 0)
        out.append(np.where(enough, coef, 0.0))
    return out[0], out[1]


def _extrapolate(k: np.ndarray, d: np.ndarray, sign: float, coef: np.ndarray, offsets: np.ndarray, ys: np.ndarray,
                 s2: np.ndarray, curv_at: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Value, measurement error and interpolation error a distance ``d`` from sample ``k`` on one side.

    ``sign`` is +1 forwards (from a sample before the time), -1 backwards;
    ``coef`` and ``offsets`` are the slope coefficients of that side
    (:func:`_end_slopes`) and the sample offsets they apply to.
    """
    n = ys.size
    c = coef[k]  # (q, 3)
    jj = np.clip(k[:, None] + offsets[None, :], 0, n - 1)
    slope = (c * ys[jj]).sum(axis=1)
    step = sign * d  # time from the sample to the query
    # value = y_k + slope * step: a linear combination of the samples
    lin = step[:, None] * c
    lin = lin + (jj == k[:, None]) * (offsets[None, :] == 0)
    value = ys[k] + slope * step
    meas = np.sqrt((lin**2 * s2[jj]).sum(axis=1))
    interp = np.sqrt((slope * d) ** 2 + (0.5 * curv_at[k] * d * d) ** 2)
    return value, meas, interp


def interpolate_series(t_at: Any, t: Any, y: Any, y_err: Any, *, max_gap_d: float) -> Interpolated:
    """Evaluate a sampled series (the target's magnitude in the other band) at other times.

    * Between two samples both within ``max_gap_d``: linear interpolation,
      ``y = (1 - w) y1 + w y2`` with ``w = (t - t1)/(t2 - t1)``; measurement
      variance ``(1 - w)^2 s1^2 + w^2 s2^2``.  The interpolation error of a
      function with second derivative ``y''`` is ``1/2 |y''| (t - t1)(t2 - t)``;
      ``y''`` comes from a weighted quadratic fit to the four samples around the
      interval, and ``sqrt(y''^2 + var(y''))`` is used so that a curvature hidden
      in the noise is not taken for zero.
    * With a usable sample within ``max_gap_d`` on one side only (the ends of a
      series, or next to a hole): the nearest sample plus the local slope times
      the gap (slope from a weighted line through up to three samples on that
      side, within ``4 max_gap_d``); the error adds ``|slope| x gap`` (as large
      as if no slope had been applied: one-sided data cannot tell whether the
      trend continues) and the curvature term ``1/2 |y''| gap^2``.  With a
      single sample nearby no variation can be estimated: the value is that
      sample with its own error, and ``max_gap_d`` is the only guard.
    * Farther than ``max_gap_d`` from every usable sample: ``ok = False``.

    Parameters
    ----------
    t_at : array_like
        Times to evaluate at (days; any order; NaN gives ``ok = False``).
    t, y, y_err : array_like
        The series: times (days, any order: sorted here), values and 1-sigma
        errors.  Samples with a non-finite time, value or error, or a negative
        error, are skipped.
    max_gap_d : float
        Largest distance (days) from a sample to a time it may be used for.

    Returns
    -------
    Interpolated
    """
    gap = check_positive(max_gap_d, "max_gap_d")
    tq = as_1d(t_at, "t_at")
    ts = as_1d(t, "t")
    ys = as_1d(y, "y", ts.size)
    es = as_1d(y_err, "y_err", ts.size)
    keep = np.isfinite(ts) & np.isfinite(ys) & np.isfinite(es) & (es >= 0)
    order = np.argsort(ts[keep], kind="stable")
    ts, ys, es = ts[keep][order], ys[keep][order], es[keep][order]
    s2 = es**2
    n = ts.size
    m = tq.size
    value = np.full(m, np.nan)
    meas = np.full(m, np.nan)
    interp = np.full(m, np.nan)
    gap_d = np.full(m, np.inf)
    one_sided = np.zeros(m, dtype=bool)
    if n == 0:
        nothing = np.zeros(m, dtype=bool)
        return Interpolated(read_only(value), read_only(value), read_only(meas), read_only(interp),
                            read_only(gap_d), read_only(one_sided, bool), read_only(nothing, bool), gap)

    finite_q = np.isfinite(tq)
    tqc = np.where(finite_q, tq, ts[0])
    right = np.searchsorted(ts, tqc, side="right")  # first sample after
    left = right - 1
    has_l = left >= 0
    has_r = right < n
    li = np.clip(left, 0, n - 1)
    ri = np.clip(right, 0, n - 1)
    dl = np.where(has_l, tqc - ts[li], np.inf)
    dr = np.where(has_r, ts[ri] - tqc, np.inf)
    in_l = has_l & (dl <= gap) & finite_q
    in_r = has_r & (dr <= gap) & finite_q
    exact = in_l & (dl == 0)

    # curvature per interval (interval k between samples k and k+1), inflated by its own uncertainty
    ypp, ypp_var = _window_curvature(ts, ys, s2)
    curv = np.sqrt(ypp**2 + ypp_var)

    # --- two-sided linear interpolation
    both = in_l & in_r & ~exact
    if np.any(both):
        i1, i2 = li[both], ri[both]
        d1, d2 = dl[both], dr[both]
        h = ts[i2] - ts[i1]
        w = np.where(h > 0, d1 / np.where(h > 0, h, 1.0), 0.5)
        value[both] = (1.0 - w) * ys[i1] + w * ys[i2]
        meas[both] = np.sqrt((1.0 - w) ** 2 * s2[i1] + w**2 * s2[i2])
        interp[both] = 0.5 * curv[i1] * d1 * d2
        gap_d[both] = np.maximum(d1, d2)
    # --- exactly at a sample
    if np.any(exact):
        value[exact] = ys[li[exact]]
        meas[exact] = es[li[exact]]
        interp[exact] = 0.0
        gap_d[exact] = 0.0

    # --- one side only: nearest sample plus slope x gap
    fwd_only = in_l & ~in_r & ~exact  # extrapolate forwards from the left sample
    bwd_only = in_r & ~in_l  # backwards from the right sample
    if np.any(fwd_only | bwd_only):
        back, fwd = _end_slopes(ts, s2, SLOPE_WINDOW * gap)
        curv_at = _curvature_at_samples(curv, n)
        for sel, coef, base, sign, dist, offsets in (
            (fwd_only, back, li, 1.0, dl, np.array([-2, -1, 0])),
            (bwd_only, fwd, ri, -1.0, dr, np.array([0, 1, 2])),
        ):
            if np.any(sel):
                value[sel], meas[sel], interp[sel] = _extrapolate(base[sel], dist[sel], sign, coef, offsets, ys, s2,
                                                                  curv_at)
                gap_d[sel] = dist[sel]
                one_sided[sel] = True

    ok = finite_q & (in_l | in_r)
    err = np.where(ok, np.sqrt(meas**2 + interp**2), np.nan)
    gap_d = np.where(~ok, np.where(finite_q, np.minimum(dl, dr), np.inf), gap_d)
    return Interpolated(
        value=read_only(np.where(ok, value, np.nan)),
        err=read_only(err),
        meas_err=read_only(np.where(ok, meas, np.nan)),
        interp_err=read_only(np.where(ok, interp, np.nan)),
        gap_d=read_only(gap_d),
        one_sided=read_only(one_sided, bool),
        ok=read_only(ok, bool),
        max_gap_d=gap,
    )

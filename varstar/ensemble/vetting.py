"""Statistics that judge stars and exposures: excess scatter, star-vs-others tests, trends.

* :func:`solve_excess`, :func:`solve_excess_grouped`: the per-star excess
  scatter that makes a reduced chi-square one;
* :func:`star_vs_others`: each star against the zero points of all the others,
  the basis of the variability test, with :func:`chi2_logsf` for its tail;
* :func:`column_median`, :func:`robust_scale_extra`: robust scales;
* :func:`components`: which stars are linked by shared exposures;
* :func:`trend_jumps` and :func:`vet_exposures`: exposure flags.
"""

from __future__ import annotations

from collections.abc import Callable

from dataclasses import dataclass

import numpy as np
from scipy import special

from varstar.ensemble.linear import LinearFit
from varstar.ensemble.settings import EnsembleSettings
from varstar.ensemble.solution import EXPOSURE_FLAGS

__all__ = [
    "MAD_TO_SIGMA",
    "StarTest",
    "chi2_logsf",
    "column_median",
    "components",
    "robust_scale_extra",
    "solve_excess",
    "solve_excess_grouped",
    "star_vs_others",
    "trend_jumps",
    "vet_exposures",
]

# Normal-distribution consistency factor of the median absolute deviation.
MAD_TO_SIGMA = 1.482602218505602


def chi2_logsf(x: np.ndarray, dof: np.ndarray) -> np.ndarray:
    """Natural log of the chi-square survival function, finite far into the tail.

    ``scipy.special.gammaincc`` gives Q(k/2, x/2); where it underflows the
    leading term of its asymptotic series, Q(a, y) ~ y^(a-1) e^(-y) / Gamma(a)
    (Abramowitz & Stegun 6.5.32), is used instead.  (``scipy.special`` rather
    than ``scipy.stats``: the latter costs most of a second to import.)
    """
    a = 0.5 * np.asarray(dof, dtype=float)
    y = 0.5 * np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = special.gammaincc(a, y)
        tail = (a - 1.0) * np.log(y) - y - special.gammaln(a)
        return np.where(q > 1e-290, np.log(q), tail)


def solve_excess(r2: np.ndarray, s2: np.ndarray, dof: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
    """Excess variance ``x >= 0`` per column with ``sum_j r2/(s2 + x) = dof``.

    ``r2`` holds squared residuals (zero where absent), ``s2`` the error
    variances (any positive value where absent).  Safeguarded Newton iteration
    in a bracket, vectorised over columns (only those that need it); ``x = 0``
    where the left side is already <= ``dof``.  ``x0`` is an optional warm start.
    """
    k = r2.shape[1]
    x_out = np.zeros(k)
    f0 = (r2 / s2).sum(axis=0) - dof
    act = np.flatnonzero((f0 > 0) & (dof > 0))
    if act.size == 0:
        return x_out
    r2a, s2a, dofa = r2[:, act], s2[:, act], dof[act]
    lo = np.zeros(act.size)
    hi = r2a.sum(axis=0) / dofa  # there sum r2/(s2+x) < sum r2/x = dof
    x = np.zeros(act.size) if x0 is None else np.clip(x0[act], lo, hi)
    for _ in range(100):
        d = s2a + x
        q = r2a / d
        f = q.sum(axis=0) - dofa
        fp = -(q / d).sum(axis=0)
        lo = np.where(f > 0, x, lo)
        hi = np.where(f < 0, x, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = x - f / fp
        bad = ~np.isfinite(newton) | (newton <= lo) | (newton >= hi)
        new = np.where(bad, 0.5 * (lo + hi), newton)
        done = np.abs(new - x) <= 1e-16 + 1e-9 * np.abs(x)
        x = new
        if np.all(done):
            break
    x_out[act] = x
    return x_out


def solve_excess_grouped(
    r2: np.ndarray, s2: np.ndarray, group: np.ndarray, n_groups: int, dof: np.ndarray
) -> np.ndarray:
    """As :func:`solve_excess` for measurements labelled by ``group`` (via ``bincount``)."""
    f0 = np.bincount(group, r2 / s2, minlength=n_groups) - dof
    active = (f0 > 0) & (dof > 0)
    lo = np.zeros(n_groups)
    hi = np.where(active, np.bincount(group, r2, minlength=n_groups) / np.where(dof > 0, dof, 1.0), 0.0)
    x = np.zeros(n_groups)
    for _ in range(200):
        d = s2 + x[group]
        q = r2 / d
        f = np.bincount(group, q, minlength=n_groups) - dof
        fp = -np.bincount(group, q / d, minlength=n_groups)
        lo = np.where(active & (f > 0), x, lo)
        hi = np.where(active & (f < 0), x, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = x - f / fp
        bad = ~np.isfinite(newton) | (newton <= lo) | (newton >= hi)
        new = np.where(active, np.where(bad, 0.5 * (lo + hi), newton), 0.0)
        done = np.abs(new - x) <= 1e-14 + 1e-10 * np.abs(x)
        x = new
        if np.all(done):
            break
    return x


@dataclass
class StarTest:
    """Each fitted star against the zero points of all the other stars."""

    r2: np.ndarray  # (n_exp, k) squared residuals about the star's own mean (0 where unused)
    V: np.ndarray  # (n_exp, k) their variance if the star is constant: mag_err^2 + Var(z_others)
    mask: np.ndarray  # (n_exp, k) exposures where the star and at least one other were used
    chi2: np.ndarray  # (k,) sum r2 / V
    dof: np.ndarray  # (k,) points - 1


def star_vs_others(W: np.ndarray, U: np.ndarray, Y: np.ndarray, S2: np.ndarray, fit: LinearFit) -> StarTest:
    """Residuals of each star against the zero points computed from the other stars only.

    ``z_j^(-i) = sum_{k != i} W_jk (Y_jk - M_k) / sum_{k != i} W_jk`` has variance
    ``1 / sum_{k != i} W_jk``, independent of star ``i``'s own noise and weight.  So
    ``Y_ij - z_j^(-i)`` about its weighted mean gives a chi-square with ``n_i - 1``
    degrees of freedom if star ``i`` is constant with the reported errors,
    whatever weight (excess) the fit currently gives it.  Testing the fit
    residuals instead would make a star that got a chance excess look worse:
    down-weighted, it no longer pulls its own zero points.
    """
    D = np.where(U, Y - fit.M, 0.0)
    WD = W * D
    S = WD.sum(axis=1)
    W_oth = fit.Wj[:, None] - W
    mask = U & (W_oth > 1e-12 * np.maximum(fit.Wj[:, None], 1e-300))
    with np.errstate(divide="ignore", invalid="ignore"):
        z_oth = np.where(mask, (S[:, None] - WD) / W_oth, 0.0)
        V = np.where(mask, S2 + 1.0 / W_oth, 1.0)
    d = np.where(mask, D - z_oth, 0.0)
    iv = np.where(mask, 1.0 / V, 0.0)
    siv = iv.sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(siv > 0, (iv * d).sum(axis=0) / siv, 0.0)
    r2 = np.where(mask, (d - mean) ** 2, 0.0)
    chi2 = (r2 * iv).sum(axis=0)
    dof = mask.sum(axis=0) - 1.0
    return StarTest(r2=r2, V=V, mask=mask, chi2=chi2, dof=dof)


def components(present: np.ndarray) -> np.ndarray:
    """Connected-component label of each column (stars linked by shared exposures).

    Breadth-first growth on the small ``k x k`` link matrix; loops over the at
    most ``k`` components and ``k`` growth steps, never over measurements.
    Labels count from zero in the order of each component's first column.
    """
    p = present.astype(float)
    link = (p.T @ p) > 0
    k = link.shape[0]
    labels = np.full(k, -1, dtype=np.intp)
    lab = 0
    while np.any(labels < 0):
        reach = np.zeros(k, dtype=bool)
        reach[np.flatnonzero(labels < 0)[0]] = True
        while True:
            grown = reach | link[reach].any(axis=0)
            if np.array_equal(grown, reach):
                break
            reach = grown
        labels[reach] = lab
        lab += 1
    return labels


def column_median(values: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Median of ``values`` over the ``mask``-ed entries of each column (NaN if none)."""
    n = mask.sum(axis=0)
    srt = np.sort(np.where(mask, values, np.inf), axis=0)
    lo = np.clip((n - 1) // 2, 0, None)
    hi = np.clip(n // 2, 0, None)
    cols = np.arange(values.shape[1])
    med = 0.5 * (srt[lo, cols] + srt[hi, cols])
    return np.where(n > 0, med, np.nan)


def robust_scale_extra(r: np.ndarray, err: np.ndarray) -> float:
    """Extra scatter ``s`` with ``1.4826 median(|r| / sqrt(err^2 + s^2)) = 1`` (zero if already <= 1)."""
    if r.size == 0:
        return 0.0

    def f(s: float) -> float:
        return MAD_TO_SIGMA * float(np.median(np.abs(r) / np.sqrt(err**2 + s * s))) - 1.0

    if f(0.0) <= 0:
        return 0.0
    return bisect_decreasing(f, MAD_TO_SIGMA * float(np.median(np.abs(r))) + 1e-12, grow=2.0, steps=100, atol=1e-12, rtol=1e-9)


def bisect_decreasing(
    f: Callable[[float], float], hi: float, *, grow: float, steps: int, atol: float, rtol: float
) -> float:
    """Root in ``(0, inf)`` of a function decreasing through zero, with ``f(0) > 0``, by bisection.

    ``hi`` is multiplied by ``grow`` until ``f(hi) <= 0``; then at most ``steps``
    halvings, stopping when the bracket is narrower than ``atol + rtol * hi``.
    Bisection, not a library root finder: it cannot leave the bracket, and the
    result stays the same number on every platform.
    """
    lo = 0.0
    while f(hi) > 0:
        hi *= grow
    for _ in range(steps):
        mid = 0.5 * (lo + hi)
        if f(mid) > 0:
            lo = mid
        else:
            hi = mid
        if hi - lo <= atol + rtol * hi:
            break
    return 0.5 * (lo + hi)


def _trend_design(ok: np.ndarray, time: np.ndarray, airmass: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Columns of the trend ``a + k X + c t`` that the data constrain, and the exposures usable for it."""
    n = ok.size
    cols = [np.ones(n)]
    x_ok = ok & np.isfinite(airmass)
    # use airmass where it is known for most exposures and actually changes
    if x_ok.any() and np.count_nonzero(x_ok) >= 0.5 * np.count_nonzero(ok) and np.ptp(airmass[x_ok]) > 1e-6:
        ok = x_ok
        cols.append(np.where(ok, airmass, 0.0))
    if ok.any() and np.ptp(time[ok]) > 0:
        t = np.where(ok, time, 0.0)
        t0 = np.median(t[ok])
        cols.append((t - t0) / np.ptp(time[ok]))
    return np.column_stack(cols), ok


def trend_jumps(
    zp: np.ndarray, zp_err: np.ndarray, time: np.ndarray, airmass: np.ndarray, settings: EnsembleSettings
) -> tuple[np.ndarray, str]:
    """Exposures whose zero point leaves the night's smooth trend.

    The trend is ``a + k X + c t`` (extinction in airmass plus a linear drift),
    started from a least-absolute-deviation fit (robust against a passing cloud
    that dims a contiguous part of the night) and refined by weighted least
    squares with iterative clipping; the scatter about it is
    ``sqrt(zp_err^2 + s^2)`` with ``s`` from the median absolute deviation.

    Returns
    -------
    jump : numpy.ndarray
        Boolean per exposure.
    note : str
        Empty, or why the test could not be made.
    """
    jump = np.zeros(zp.size, dtype=bool)
    ok = np.isfinite(zp) & np.isfinite(zp_err) & np.isfinite(time)
    A_all, ok = _trend_design(ok, time, airmass)
    n_ok = int(np.count_nonzero(ok))
    if n_ok < A_all.shape[1] + 3:
        return jump, (
            f"only {n_ok} exposure(s) with a zero point: the zero-point jump test needs at least "
            f"{A_all.shape[1] + 3} and was skipped"
        )
    A, y, e = A_all[ok], zp[ok], zp_err[ok]
    # least absolute deviations by iteratively reweighted least squares
    beta = np.linalg.lstsq(A, y, rcond=None)[0]
    floor = max(1e-4, 0.1 * float(np.median(e)))
    for _ in range(50):
        r = y - A @ beta
        sw = 1.0 / np.sqrt(np.maximum(np.abs(r), floor))
        new = np.linalg.lstsq(A * sw[:, None], y * sw, rcond=None)[0]
        if np.max(np.abs(new - beta)) < 1e-7:
            beta = new
            break
        beta = new
    inl = np.ones(y.size, dtype=bool)
    s = 0.0
    for _ in range(50):
        r = y - A @ beta
        s = robust_scale_extra(r[inl], e[inl])
        sig = np.sqrt(e**2 + s * s)
        new_inl = np.abs(r) <= settings.trend_clip_sigma * sig
        if np.count_nonzero(new_inl) < A.shape[1] + 2 or np.array_equal(new_inl, inl):
            break
        inl = new_inl
        sw = 1.0 / sig[inl]
        beta = np.linalg.lstsq(A[inl] * sw[:, None], y[inl] * sw, rcond=None)[0]
    r = y - A @ beta
    sig = np.sqrt(e**2 + s * s)
    jump[np.flatnonzero(ok)] = (np.abs(r) > settings.zp_jump_sigma * sig) & (np.abs(r) > settings.zp_jump_min_mag)
    return jump, ""


def vet_exposures(
    U: np.ndarray,
    zero_point: np.ndarray,
    zero_point_err: np.ndarray,
    time: np.ndarray,
    airmass: np.ndarray,
    settings: EnsembleSettings,
) -> tuple[np.ndarray, tuple[str, ...], str]:
    """Flag exposures (never drop them): too few comparisons, a large zero-point error, a jump.

    Parameters
    ----------
    U : numpy.ndarray
        ``(n_exp, k)`` bool: comparison measurements used in the final fit.
    zero_point, zero_point_err : numpy.ndarray
        ``(n_exp,)`` calibrated zero points and their errors (NaN without comparisons).
    time, airmass : numpy.ndarray
        ``(n_exp,)`` for the smooth trend of :func:`trend_jumps`.
    settings : EnsembleSettings
        ``min_comparisons``, ``zp_err_factor`` and the trend thresholds.

    Returns
    -------
    n_comparisons : numpy.ndarray
        ``(n_exp,)`` comparison measurements used.
    flags : tuple of str
        ``(n_exp,)`` ``""`` or ``;``-joined codes of :data:`EXPOSURE_FLAGS`.
    note : str
        Empty, or why the jump test was skipped.
    """
    n_comp = U.sum(axis=1).astype(int)
    few_exp = (n_comp < settings.min_comparisons) | (n_comp == 0)
    finite_err = zero_point_err[np.isfinite(zero_point_err)]
    med_err = float(np.median(finite_err)) if finite_err.size else float("nan")
    with np.errstate(invalid="ignore"):
        big_err = np.isfinite(zero_point_err) & (zero_point_err > settings.zp_err_factor * med_err)
    jump, note = trend_jumps(zero_point, zero_point_err, time, airmass, settings)
    flag_parts = np.stack([few_exp, big_err, jump], axis=1)
    flag_list = [""] * zero_point.size
    for j in np.flatnonzero(flag_parts.any(axis=1)):  # flagged exposures only (few)
        flag_list[j] = ";".join(c for c, f in zip(EXPOSURE_FLAGS, flag_parts[j]) if f)
    return n_comp, tuple(flag_list), note

"""Straight lines with correlated errors in both variables, batched over subsets of the points.

The least-squares line of York et al. (2004, Am. J. Phys. 72, 367; reference
from memory), with an excess variance fitted per line so that the chi-square
equals its degrees of freedom, and a leave-one-out outlier test built on it.
:func:`varstar.transform.coefficients.fit_coefficients` uses both for the two
Hardie (1962) transformation lines.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy import special

from varstar.transform.checks import VAR_FLOOR

__all__ = ["york_lines", "line_and_outliers"]


def _excess_variance(r2: np.ndarray, v0: np.ndarray, mult: np.ndarray, dof: np.ndarray,
                     start: np.ndarray) -> np.ndarray:
    """Per row, the ``s2 >= 0`` with ``sum r2 / (v0 + mult s2) = dof`` (0 when already ``<= dof``).

    ``r2`` and ``v0`` are ``(m, n)`` (zero ``r2`` outside a row's subset),
    ``mult`` is ``(m, 1)``; a safeguarded Newton iteration in a bracket, on all
    rows at once, started from ``start``.
    """
    chi0 = (r2 / v0).sum(axis=1)
    need = (chi0 > dof) & (dof > 0)
    lo = np.zeros_like(start)
    hi = np.where(need, (r2 / mult).sum(axis=1) / np.maximum(dof, 1.0), 0.0)
    z = np.clip(start, lo, hi)
    for _ in range(100):
        d = v0 + mult * z[:, None]
        q = r2 / d
        f = q.sum(axis=1) - dof
        fp = -(mult[:, 0] * (q / d).sum(axis=1))
        lo = np.where(need & (f > 0), z, lo)
        hi = np.where(need & (f <= 0), z, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = z - f / fp
        step_bad = ~np.isfinite(newton) | (newton <= lo) | (newton >= hi)
        new = np.where(need, np.where(step_bad, 0.5 * (lo + hi), newton), 0.0)
        if np.all(np.abs(new - z) <= 1e-16 + 1e-10 * np.abs(z)):
            z = new
            break
        z = new
    return np.where(need, z, 0.0)


def york_lines(
    x: np.ndarray,
    y: np.ndarray,
    sx2: np.ndarray,
    sy2: np.ndarray,
    cxy: np.ndarray,
    extra: tuple[float, float, float],
    mask: np.ndarray,
) -> dict[str, np.ndarray]:
    """Straight lines ``y = a + b x`` through subsets of points, errors in both variables.

    York et al. (2004) least-squares line with correlated errors (``sx2``,
    ``sy2``, ``cxy`` per point), plus an excess variance ``s2`` fitted per
    subset so that ``chi2 = n - 2`` (zero if the errors already explain the
    scatter).  The excess enters ``(var x, var y, cov xy)`` as ``extra * s2``:
    excess scatter of the catalogue magnitudes, which enter both variables
    (``extra = (0, 0, 0)`` gives York's line with the errors as given).

    Parameters
    ----------
    x, y : numpy.ndarray
        ``(n,)`` the points.
    sx2, sy2, cxy : numpy.ndarray
        ``(n,)`` variances of ``x`` and ``y`` and their covariance.
    extra : (float, float, float)
        Multipliers of the excess variance in ``var x``, ``var y``, ``cov xy``.
    mask : numpy.ndarray
        ``(m, n)`` bool; each row selects one subset (at least three points).
        All rows are solved at once.

    Returns
    -------
    dict
        Per row: slope ``b``, intercept ``a``, their York standard errors
        (``b_err``, ``a_err``, for known variances) and covariance ``cov_ab``,
        ``s2``, ``sum_w`` and the weighted mean adjusted abscissa ``xbar`` (for
        prediction variances), ``dof``, and the per-point weights ``w`` ``(m, n)``.
    """
    ax, ay, ac = extra
    mk = mask.astype(float)
    npts = mk.sum(axis=1)
    dof = npts - 2.0
    # start from an unweighted straight line
    xm = (mk * x).sum(axis=1) / npts
    ym = (mk * y).sum(axis=1) / npts
    b = (mk * (x - xm[:, None]) * (y - ym[:, None])).sum(axis=1) / (mk * (x - xm[:, None]) ** 2).sum(axis=1)
    s2 = np.zeros(mask.shape[0])

    def state(b: np.ndarray, s2: np.ndarray) -> tuple[np.ndarray, ...]:
        """York weights, weighted centroid, centred data and the beta terms at slope b, excess s2."""
        sx = sx2[None, :] + ax * s2[:, None]
        sy = sy2[None, :] + ay * s2[:, None]
        cc = cxy[None, :] + ac * s2[:, None]
        W = mk / np.maximum(sy + b[:, None] ** 2 * sx - 2.0 * b[:, None] * cc, VAR_FLOOR)
        sw = W.sum(axis=1)
        X = (W * x).sum(axis=1) / sw
        Y = (W * y).sum(axis=1) / sw
        U = x[None, :] - X[:, None]
        V = y[None, :] - Y[:, None]
        beta = W * (U * sy + b[:, None] * V * sx - (b[:, None] * U + V) * cc)
        return W, sw, X, Y, U, V, beta

    for _ in range(500):
        W, sw, X, Y, U, V, beta = state(b, s2)
        b_new = (W * beta * V).sum(axis=1) / (W * beta * U).sum(axis=1)
        a = Y - b_new * X
        r2 = mk * (y[None, :] - a[:, None] - b_new[:, None] * x[None, :]) ** 2
        # excess: sum r2 / (v0 + m s2) = dof, solved on all rows at once
        v0 = np.maximum(sy2[None, :] + b_new[:, None] ** 2 * sx2[None, :] - 2.0 * b_new[:, None] * cxy[None, :],
                        VAR_FLOOR)
        mult = np.maximum(ay + b_new**2 * ax - 2.0 * b_new * ac, 1e-12)[:, None]
        s2_new = _excess_variance(r2, v0, mult, dof, s2)
        done = np.all(np.abs(b_new - b) <= 1e-12 * (1.0 + np.abs(b))) and np.all(
            np.abs(s2_new - s2) <= 1e-14 + 1e-8 * s2
        )
        b, s2 = b_new, s2_new
        if done:
            break
    W, sw, X, Y, U, V, beta = state(b, s2)
    a = Y - b * X
    xadj = X[:, None] + beta
    xbar = (W * xadj).sum(axis=1) / sw
    u = xadj - xbar[:, None]
    b_var = 1.0 / (W * u * u).sum(axis=1)
    a_var = 1.0 / sw + xbar**2 * b_var
    return {"b": b, "a": a, "b_err": np.sqrt(b_var), "a_err": np.sqrt(a_var), "cov_ab": -xbar * b_var,
            "s2": s2, "sum_w": sw, "xbar": xbar, "w": W, "dof": dof}


def line_and_outliers(
    x: np.ndarray, y: np.ndarray, sx2: np.ndarray, sy2: np.ndarray, cxy: np.ndarray,
    extra: tuple[float, float, float], clip_sigma: float, test: bool,
) -> tuple[dict[str, Any], np.ndarray, np.ndarray]:
    """The line through all points, and each point judged against the line through the others.

    Returns the full fit (row 0 of :func:`york_lines`, as scalars) and, per
    point, its externally studentised residual and the rejection threshold:
    the residual from the line fitted without it, over the square root of its
    variance (errors and the others' excess) plus the variance of that line at
    its abscissa.  The threshold is the Student-t quantile with the others'
    ``n - 3`` degrees of freedom at the two-sided probability of ``clip_sigma``
    normal sigma (the scatter is judged from the others).  Without ``test``
    only the full fit is made (residuals zero, thresholds infinite).
    """
    n = x.size
    rows = [np.ones((1, n), dtype=bool)]
    if test:
        rows.append(~np.eye(n, dtype=bool))
    fit = york_lines(x, y, sx2, sy2, cxy, extra, np.vstack(rows))
    full = {k: v[0] for k, v in fit.items()}
    if not test:
        return full, np.zeros(n), np.full(n, np.inf)
    b, a, s2 = fit["b"][1:], fit["a"][1:], fit["s2"][1:]
    ax, ay, ac = extra
    d = y - a - b * x
    var_pt = (sy2 + ay * s2) + b**2 * (sx2 + ax * s2) - 2.0 * b * (cxy + ac * s2)
    var_line = 1.0 / fit["sum_w"][1:] + (x - fit["xbar"][1:]) ** 2 * fit["b_err"][1:] ** 2
    t = np.abs(d) / np.sqrt(np.maximum(var_pt + var_line, VAR_FLOOR))
    p_two = special.erfc(clip_sigma / math.sqrt(2.0))
    dof_o = fit["dof"][1:]  # the others: (n - 1) - 2
    thr = special.stdtrit(np.maximum(dof_o, 1.0), 1.0 - 0.5 * p_two)
    return full, t, thr

"""The weighted least-squares core of the ensemble: ``m_ij = M_i + z_j (+ k'' D_ij)``.

:func:`solve_weighted` eliminates the zero points analytically and solves the
small star system (a Schur complement) with its exact covariance;
:func:`zero_point_variance` gives the zero-point variances in any gauge of the
star magnitudes; :func:`colour_regressor` and :func:`colour_step` add the one
colour-extinction term by the Frisch-Waugh-Lovell theorem.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "AIRMASS_MIN_SPAN",
    "COLOUR_MIN_SPAN",
    "ColourTerm",
    "LinearFit",
    "colour_regressor",
    "colour_step",
    "solve_weighted",
    "zero_point_variance",
]

# Colour extinction is fitted only when the comparison stars' colours span this much
# (mag) and the airmass this much: otherwise the term is not constrained (common practice).
COLOUR_MIN_SPAN = 0.3
AIRMASS_MIN_SPAN = 0.1


@dataclass
class LinearFit:
    """One weighted least-squares solution (mean-zero gauge over the fitted stars)."""

    M: np.ndarray  # (k,) star magnitudes, sum zero
    z: np.ndarray  # (n_exp,) exposure zero points (NaN without comparisons)
    CM: np.ndarray  # (k, k) covariance of M in that gauge
    P: np.ndarray  # (n_exp, k) weights normalised per exposure
    Wj: np.ndarray  # (n_exp,) total weight per exposure
    var_pred: np.ndarray  # (n_exp, k) variance of the prediction M_i + z_j (gauge invariant)


def solve_weighted(W: np.ndarray, Y: np.ndarray) -> LinearFit:
    """Weighted least squares of ``Y_ji = M_i + z_j`` with weights ``W`` (0 = missing).

    The ``z_j`` are eliminated analytically: with ``P_ji = W_ji / W_j`` and the
    exposure means ``x_j = sum_i P_ji Y_ji``, the normal equations for ``M`` are
    ``A M = b`` with ``A = diag(sum_j W_ji) - W^T P`` and
    ``b_i = sum_j W_ji (Y_ji - x_j)``; then ``z = x - P M``.  ``A`` is singular
    (a common shift), so it is bordered by the constraint ``sum_i M_i = 0``.
    Because ``b`` and ``x`` are uncorrelated, ``Cov(M) = G A G^T`` with ``G`` the
    constrained inverse, and ``Var(z_j) = 1/W_j + (P Cov(M) P^T)_jj``.

    Parameters
    ----------
    W : numpy.ndarray
        ``(n_exp, k)`` weights, zero where a star is missing; the stars must form
        one connected ensemble.
    Y : numpy.ndarray
        ``(n_exp, k)`` magnitudes (any finite value where ``W`` is zero).

    Returns
    -------
    LinearFit
    """
    n_exp, k = W.shape
    Wj = W.sum(axis=1)
    has = Wj > 0
    inv_Wj = np.divide(1.0, Wj, out=np.full(n_exp, np.nan), where=has)
    P = W * np.where(has, inv_Wj, 0.0)[:, None]
    WY = W * Y
    x = np.where(has, WY.sum(axis=1) * np.where(has, inv_Wj, 0.0), np.nan)
    A = np.diag(W.sum(axis=0)) - W.T @ P
    b = WY.sum(axis=0) - W.T @ np.where(has, x, 0.0)
    scale = max(float(np.trace(A)) / k, 1e-300)
    K = np.zeros((k + 1, k + 1))
    K[:k, :k] = A
    K[:k, k] = scale
    K[k, :k] = scale
    G = np.linalg.inv(K)[:k, :k]
    M = G @ b
    M -= M.mean()  # remove rounding drift from the constraint
    CM = G @ A @ G.T
    CM = 0.5 * (CM + CM.T)
    z = x - P @ M
    PC = P @ CM
    pcp = np.einsum("jk,jk->j", PC, P)
    var_z = inv_Wj + pcp
    var_pred = np.diag(CM)[None, :] + var_z[:, None] - 2.0 * PC
    return LinearFit(M=M, z=z, CM=CM, P=P, Wj=Wj, var_pred=var_pred)


def zero_point_variance(fit: LinearFit, CM: np.ndarray) -> np.ndarray:
    """``Var(z_j)`` for a star covariance ``CM`` given in some gauge (NaN without comparisons)."""
    has = fit.Wj > 0
    inv_Wj = np.divide(1.0, fit.Wj, out=np.full(fit.Wj.shape, np.nan), where=has)
    return inv_Wj + np.einsum("jk,jk->j", fit.P @ CM, fit.P)


def colour_step(W: np.ndarray, U: np.ndarray, Dc: np.ndarray, R: np.ndarray) -> tuple[float, float]:
    """One exact least-squares step for the colour-extinction coefficient.

    ``R`` are the residuals of the ``M + z`` fit with the current coefficient
    removed.  By the Frisch-Waugh-Lovell theorem the joint weighted solution
    changes the coefficient by ``sum W R Dres / sum W Dres^2``, where ``Dres``
    is the part of the regressor ``Dc`` that ``M + z`` cannot absorb; the
    denominator's inverse is the coefficient's variance.

    Parameters
    ----------
    W : numpy.ndarray
        ``(n_exp, k)`` weights (0 = missing).
    U : numpy.ndarray
        ``(n_exp, k)`` bool: the measurement is in the fit.
    Dc : numpy.ndarray
        ``(n_exp, k)`` regressor of the coefficient.
    R : numpy.ndarray
        ``(n_exp, k)`` residuals (0 where not used).

    Returns
    -------
    (step, err) : tuple of float
        ``err`` is NaN (and ``step`` zero) when the regressor is fully absorbed.
    """
    dfit = solve_weighted(W, np.where(U, Dc, 0.0))
    dres = np.where(U, Dc - dfit.M - np.nan_to_num(dfit.z)[:, None], 0.0)
    denom = float(np.sum(W * dres * dres))
    if not denom > 0:
        return 0.0, float("nan")
    return float(np.sum(W * R * dres)) / denom, 1.0 / math.sqrt(denom)


@dataclass(frozen=True)
class ColourTerm:
    """The colour-extinction regressor ``D_ji = X_j (c_i - c_ref)`` of the comparison columns."""

    D: np.ndarray  # (n_exp, k) zero when the term is not fitted
    reference: float  # c_ref, NaN when not fitted
    fitted: bool


def colour_regressor(colour: np.ndarray | None, airmass: np.ndarray, comp_idx: np.ndarray) -> ColourTerm:
    """Step 2: the regressor of the single ``k''`` term, or none when it is not constrained.

    The term is fitted when at least three comparison stars have colours spanning
    :data:`COLOUR_MIN_SPAN` mag and the airmass spans :data:`AIRMASS_MIN_SPAN`.
    It is fitted jointly with ``M`` and ``z`` by :func:`colour_step` (regress the
    residuals on the part of ``D`` that ``M`` and ``z`` cannot absorb), which for
    fixed weights is the exact joint solution.  Stars without a colour count as
    ``c_ref``, the mean colour of those with one.

    Parameters
    ----------
    colour : numpy.ndarray or None
        ``(n_star,)`` catalogue colour index (checked length), NaN if unknown.
    airmass : numpy.ndarray
        ``(n_exp,)`` airmass of each exposure (NaN counts as zero in ``D``).
    comp_idx : numpy.ndarray
        ``(k,)`` star index of each comparison column.
    """
    n_exp, k_all = airmass.size, comp_idx.size
    none = ColourTerm(D=np.zeros((n_exp, k_all)), reference=float("nan"), fitted=False)
    if colour is None:
        return none
    col = colour[comp_idx]
    has_col = np.isfinite(col)
    x_span = airmass[np.isfinite(airmass)]
    if not (
        np.count_nonzero(has_col) >= 3
        and np.ptp(col[has_col]) >= COLOUR_MIN_SPAN
        and x_span.size >= 2
        and np.ptp(x_span) >= AIRMASS_MIN_SPAN
    ):
        return none
    c_ref = float(np.mean(col[has_col]))
    D = np.nan_to_num(airmass)[:, None] * np.where(has_col, col - c_ref, 0.0)[None, :]
    return ColourTerm(D=D, reference=c_ref, fitted=True)

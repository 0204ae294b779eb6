"""The tie of the ensemble to the catalogue (step 5 of :func:`varstar.ensemble.solve_ensemble`).

The ensemble is tied to the catalogue by a weighted mean of the offsets
``M_i - C_i`` whose weights contain an excess scatter of the catalogue offsets
(the Paule & Mandel 1982 estimator, J. Res. NBS 87, 377, reference from memory),
so that disagreeing catalogue values (untransformed colour terms) give an honest
``calibration_err``, widened to the Student-t 68.27% quantile when that scatter
had to be estimated from few stars.  Stars whose offset is far from the others
leave the tie (:func:`select_tie`); they still help the zero points.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import special

from varstar.ensemble.linear import LinearFit, zero_point_variance
from varstar.ensemble.settings import EnsembleSettings
from varstar.ensemble.vetting import MAD_TO_SIGMA, bisect_decreasing
from varstar.errors import ReductionError

__all__ = ["Calibration", "CatalogTie", "calibrate", "paule_mandel", "select_tie"]

# Upper quantile of a normal distribution at +1 sigma, Phi(1).
_ONE_SIGMA_QUANTILE = 0.8413447460685429


def paule_mandel(d: np.ndarray, v: np.ndarray) -> float:
    """Excess variance ``s2`` of values ``d`` with variances ``v`` (Paule & Mandel 1982).

    Solves ``sum (d - dbar)^2 / (v + s2) = n - 1`` with ``dbar`` the weighted mean
    at the same ``s2``; zero when the values already agree within their errors.
    """
    n = d.size
    if n < 2:
        return 0.0
    v = np.maximum(v, 1e-300)

    def q(s2: float) -> float:
        w = 1.0 / (v + s2)
        dbar = np.sum(w * d) / np.sum(w)
        return float(np.sum(w * (d - dbar) ** 2)) - (n - 1)

    if q(0.0) <= 0:
        return 0.0
    return bisect_decreasing(q, float(np.var(d)) * n + float(np.max(v)), grow=4.0, steps=200, atol=1e-15, rtol=1e-12)


@dataclass(frozen=True)
class CatalogTie:
    """Which fitted stars tie the ensemble to the catalogue (all ``(k,)`` over the fitted columns)."""

    tie: np.ndarray  # bool, in the tie
    excess_var: float  # fitted excess variance of the catalogue offsets (mag^2)
    verdicts: tuple[tuple[int, str, str], ...]  # (fitted column, "catalog_offset", reason)
    warnings: tuple[str, ...]


def select_tie(
    offset: np.ndarray,
    offset_var: np.ndarray,
    has_cat: np.ndarray,
    cat_err: np.ndarray,
    labels: Sequence[str],
    settings: EnsembleSettings,
) -> CatalogTie:
    """Leave out, one at a time, the star whose catalogue offset is furthest from the others.

    A star leaves when its offset is further from the median than
    ``catalog_sigma`` robust sigma (median absolute deviation, combined with its
    own error) and than ``catalog_min_mag``.  With two catalogue stars nothing
    can be decided: a warning says so.

    Parameters
    ----------
    offset : numpy.ndarray
        ``(k,)`` fitted magnitude minus catalogue (NaN without a catalogue value).
    offset_var : numpy.ndarray
        ``(k,)`` variance of the fitted magnitudes.
    has_cat : numpy.ndarray
        ``(k,)`` bool: the star has a catalogue magnitude.
    cat_err : numpy.ndarray
        ``(k,)`` catalogue 1-sigma (>= 0).
    labels : sequence of str
        ``(k,)`` star names for reasons and warnings.
    settings : EnsembleSettings
        ``catalog_sigma`` and ``catalog_min_mag``.

    Raises
    ------
    ReductionError
        No star with a catalogue magnitude is left.
    """
    tie = has_cat.copy()
    s_cat2 = 0.0
    verdicts: list[tuple[int, str, str]] = []
    warnings: list[str] = []
    while True:
        v = cat_err[tie] ** 2 + offset_var[tie]
        dd = offset[tie]
        s_cat2 = paule_mandel(dd, v)
        n_tie = int(np.count_nonzero(tie))
        if n_tie < 2:
            break
        med = float(np.median(dd))
        sig_rob = MAD_TO_SIGMA * float(np.median(np.abs(dd - med))) if n_tie >= 3 else 0.0
        thr = np.maximum(settings.catalog_min_mag, settings.catalog_sigma * np.sqrt(sig_rob**2 + v))
        ratio = np.abs(dd - med) / thr
        if n_tie == 2:
            if np.any(ratio > 1.0):
                a, b = (labels[c] for c in np.flatnonzero(tie))
                warnings.append(
                    f"the only two comparison stars with catalogue magnitudes ({a} and {b}) disagree by "
                    f"{abs(dd[0] - dd[1]):.3f} mag after the ensemble fit; two stars cannot tell which catalogue "
                    f"value is wrong: add comparison stars with catalogue magnitudes"
                )
            break
        o = int(np.argmax(ratio))
        if ratio[o] <= 1.0:
            break
        c_local = int(np.flatnonzero(tie)[o])
        tie[c_local] = False
        verdicts.append(
            (
                c_local,
                "catalog_offset",
                f"catalogue offset {dd[o] - med:+.3f} mag from the ensemble median "
                f"(robust sigma {sig_rob:.3f} mag; limit {thr[o]:.3f} mag); kept for the zero points, not for the tie",
            )
        )
    n_tie = int(np.count_nonzero(tie))
    if n_tie == 0:
        raise ReductionError(
            "no comparison star with a catalogue magnitude is left in the ensemble: the night cannot be "
            "tied to the catalogue; add comparison stars with catalogue magnitudes"
        )
    if n_tie == 1:
        warnings.append(
            "only one comparison star with a catalogue magnitude is in the tie: calibration_err rests on its "
            "quoted catalogue error alone"
        )
    return CatalogTie(tie=tie, excess_var=s_cat2, verdicts=tuple(verdicts), warnings=tuple(warnings))


@dataclass(frozen=True)
class Calibration:
    """Zero points and star magnitudes on the catalogue's scale."""

    zero_point: np.ndarray  # (n_exp,) NaN without comparisons
    zero_point_err: np.ndarray  # (n_exp,) photometric 1-sigma, including the tie's noise
    calibration_err: float  # 1-sigma of the tie, common to every exposure
    tie_weight: np.ndarray  # (k,) normalised weights of the tie
    star_mag: np.ndarray  # (k,) fitted star magnitudes on the calibrated scale


def calibrate(fit: LinearFit, tie: CatalogTie, cat: np.ndarray, cat_err: np.ndarray) -> Calibration:
    """Move the fit to the catalogue's scale with the tie's weights.

    The weights are ``1 / (cat_err^2 + Var(M_i) + s_cat^2)`` over the stars of the
    tie.  The star magnitudes are moved to the gauge ``sum(ubar M) = 0``, so the
    zero points carry the tie's photometric noise exactly; ``calibration_err``
    holds the catalogue part, ``sqrt(sum ubar^2 (cat_err^2 + s_cat^2))``, widened
    to Student's t with ``n_tie - 1`` degrees of freedom when ``s_cat`` was fitted.

    Parameters
    ----------
    fit : LinearFit
        The final fit (gauge ``sum M = 0``).
    tie : CatalogTie
        The stars of the tie and the catalogue scatter.
    cat, cat_err : numpy.ndarray
        ``(k,)`` catalogue magnitudes (NaN outside the tie allowed) and 1-sigma.
    """
    k = fit.M.size
    var_M0 = np.diag(fit.CM)
    s_cat2 = tie.excess_var
    u = np.zeros(k)
    u[tie.tie] = 1.0 / (cat_err[tie.tie] ** 2 + var_M0[tie.tie] + s_cat2)
    ubar = u / u.sum()
    shift = float(ubar @ fit.M)
    T = np.eye(k) - np.outer(np.ones(k), ubar)
    CMt = T @ fit.CM @ T.T
    M_t = fit.M - shift
    cat_in = np.where(tie.tie, cat, 0.0)
    delta_tie = -float(ubar @ cat_in)
    zero_point = fit.z + shift + delta_tie
    with np.errstate(invalid="ignore"):
        zero_point_err = np.sqrt(zero_point_variance(fit, CMt))
    zero_point = np.where(fit.Wj > 0, zero_point, np.nan)
    zero_point_err = np.where(fit.Wj > 0, zero_point_err, np.nan)
    calibration_err = math.sqrt(float(np.sum(ubar**2 * (cat_err**2 + s_cat2) * tie.tie)))
    n_tie = int(np.count_nonzero(tie.tie))
    if s_cat2 > 0 and n_tie >= 2:
        # the catalogue scatter was estimated from the n_tie offsets themselves: the tie then
        # follows Student's t with n_tie - 1 degrees of freedom, so widen the error to the
        # t quantile that contains 68.27% (the "1 sigma" of a normal distribution)
        calibration_err *= float(special.stdtrit(n_tie - 1, _ONE_SIGMA_QUANTILE))
    return Calibration(
        zero_point=zero_point,
        zero_point_err=zero_point_err,
        calibration_err=calibration_err,
        tie_weight=ubar,
        star_mag=M_t - delta_tie,
    )

"""What a night's two ensemble solutions contribute to the transformation.

Against an ensemble of comparison stars the zero points and first-order
extinction cancel, so the transformation of a night needs only a "reference
star" made of the comparison stars (its standard and calibrated instrumental
colour), the colour the V tie refers to, the colour-extinction terms and the
calibration errors of the two bands: a :class:`NightReference`, built from
per-comparison-star arrays by :func:`night_reference`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from varstar.errors import InputError
from varstar.results import Result
from varstar.transform.checks import ONE_SIGMA_QUANTILE, VAR_FLOOR, as_1d, finite_fields
from varstar.transform.coefficients import Coefficients

__all__ = ["NightReference", "night_reference"]


@dataclass(frozen=True)
class NightReference(Result):
    """What a night's two ensemble solutions contribute to the transformation.

    Attributes
    ----------
    tie_colour_v : float
        ``c_tie``: catalogue B - V of the V ensemble's tie, ``sum_i u^V_i c_i``.
    ref_colour_std, ref_colour_std_err : float
        Standard B - V of the reference star (comparison stars with weights
        ``u_i`` summing to one) and its 1-sigma from the catalogue.
    ref_colour_inst, ref_colour_inst_err : float
        Its calibrated instrumental colour ``sum_i u_i (b~_i - v~_i)`` (comparison
        stars' colour-extinction-free calibrated mean magnitudes) and its 1-sigma
        from the photometry.
    kappa_b, kappa_b_err, kappa_v, kappa_v_err : float
        Second-order (colour) extinction in b and v (mag per airmass per mag of
        B - V) and 1-sigma; 0 where none is applied.
    cref_b, cref_v : float
        The colour each band's zero points refer to (NaN allowed where that
        band's kappa and its error are zero).
    cal_err_b, cal_err_v : float
        The bands' night calibration errors (ties to the catalogue).
    """

    tie_colour_v: float
    ref_colour_std: float
    ref_colour_std_err: float
    ref_colour_inst: float
    ref_colour_inst_err: float
    kappa_b: float = 0.0
    kappa_b_err: float = 0.0
    kappa_v: float = 0.0
    kappa_v_err: float = 0.0
    cref_b: float = float("nan")
    cref_v: float = float("nan")
    cal_err_b: float = 0.0
    cal_err_v: float = 0.0

    def __post_init__(self) -> None:
        finite_fields(self, (
            "tie_colour_v", "ref_colour_std", "ref_colour_std_err", "ref_colour_inst", "ref_colour_inst_err",
            "kappa_b", "kappa_b_err", "kappa_v", "kappa_v_err", "cal_err_b", "cal_err_v",
        ), "night reference")
        for band in ("b", "v"):
            cref = float(getattr(self, f"cref_{band}"))
            object.__setattr__(self, f"cref_{band}", cref)
            used = getattr(self, f"kappa_{band}") != 0 or getattr(self, f"kappa_{band}_err") != 0
            if used and not math.isfinite(cref):
                raise InputError(
                    f"night reference cref_{band} must be finite when kappa_{band} or its error is not zero: the "
                    f"colour-extinction correction needs the colour the zero points refer to"
                )


def _excess_variance(d: np.ndarray, v: np.ndarray) -> float:
    """Excess variance of ``d`` about its weighted mean (Paule & Mandel 1982, reference
    from memory): the ensemble's estimator, with this package's variance floor."""
    from varstar.ensemble import paule_mandel

    return paule_mandel(d, np.maximum(v, VAR_FLOOR))


def night_reference(
    catalog_B: Any,
    catalog_B_err: Any,
    catalog_V: Any,
    catalog_V_err: Any,
    b_mean: Any,
    b_mean_err: Any,
    v_mean: Any,
    v_mean_err: Any,
    tie_weight_v: Any,
    coeffs: Coefficients,
    *,
    kappa_b: float = float("nan"),
    kappa_b_err: float = float("nan"),
    kappa_v: float = float("nan"),
    kappa_v_err: float = float("nan"),
    cref_b: float = float("nan"),
    cref_v: float = float("nan"),
    cal_err_b: float = 0.0,
    cal_err_v: float = 0.0,
) -> NightReference:
    """Build a :class:`NightReference` from per-comparison-star arrays.

    Weights: the reference star uses ``u_i`` = the V ensemble's tie weights
    ``tie_weight_v`` restricted to stars with a finite catalogue B and V and
    finite ``b_mean`` and ``v_mean``, renormalised to sum one.  The same ``u``
    gives ``tie_colour_v`` (exact when every V-tie star has both catalogue
    magnitudes, otherwise an approximation).

    ``ref_colour_std_err`` combines the catalogue errors,
    ``sum u_i^2 (sB_i^2 + sV_i^2 + s^2)``, where ``s^2`` is the excess scatter
    (Paule & Mandel 1982) of ``c_i - mu (b~_i - v~_i)`` among the stars beyond
    their errors (catalogue colours worse than quoted); when ``s^2`` had to be
    estimated the error is widened to the Student-t 68.27% quantile with
    ``n - 1`` degrees of freedom, as the ensemble's calibration error is.
    ``ref_colour_inst_err`` is ``sqrt(sum u_i^2 (sb~_i^2 + sv~_i^2))``.

    Colour extinction: a NaN ``kappa`` means the ensemble did not fit it; then
    ``kappa_v = 0`` and ``kappa_b = coeffs.k2_bv`` (errors from ``coeffs``), and
    the reference colour stands in for the colour the zero points refer to
    (without a colour term the zero points follow the weighted mean colour of
    the comparison stars).  A NaN error of a given kappa counts as zero.

    Parameters
    ----------
    catalog_B, catalog_B_err, catalog_V, catalog_V_err : array_like
        ``(n_star,)`` catalogue magnitudes and errors (NaN error counts as zero).
    b_mean, b_mean_err, v_mean, v_mean_err : array_like
        ``(n_star,)`` colour-extinction-free calibrated mean magnitudes of the
        comparison stars (with :mod:`varstar.ensemble`: ``catalog_mag +
        star_offset`` of the stars in the fit) and their 1-sigma.
    tie_weight_v : array_like
        ``(n_star,)`` the V ensemble's tie weights (``EnsembleSolution.tie_weight``).
    coeffs : Coefficients
        For ``mu`` (excess test) and the fallback ``k2_bv``.
    kappa_b, kappa_b_err, kappa_v, kappa_v_err, cref_b, cref_v : float
        ``colour_extinction``, ``colour_extinction_err`` and ``colour_reference``
        of the two ensembles.
    cal_err_b, cal_err_v : float
        ``calibration_err`` of the two ensembles.

    Returns
    -------
    NightReference

    Raises
    ------
    InputError
        No comparison star in the V tie has both catalogue colours and both
        calibrated means.
    """
    if not isinstance(coeffs, Coefficients):
        raise InputError(f"coeffs must be a Coefficients, got {type(coeffs).__name__}")
    u_all = as_1d(tie_weight_v, "tie_weight_v")
    n = u_all.size
    cB, cV = as_1d(catalog_B, "catalog_B", n), as_1d(catalog_V, "catalog_V", n)
    bm, vm = as_1d(b_mean, "b_mean", n), as_1d(v_mean, "v_mean", n)
    eB, eV, eb, ev = (
        np.nan_to_num(np.abs(as_1d(a, nm, n)), nan=0.0)
        for a, nm in ((catalog_B_err, "catalog_B_err"), (catalog_V_err, "catalog_V_err"),
                      (b_mean_err, "b_mean_err"), (v_mean_err, "v_mean_err"))
    )
    sel = np.isfinite(cB) & np.isfinite(cV) & np.isfinite(bm) & np.isfinite(vm) & np.isfinite(u_all) & (u_all > 0)
    if not np.any(sel):
        raise InputError(
            "no comparison star in the V ensemble's tie has catalogue B and V and calibrated means in both bands: "
            "the colour transformation needs at least one (better three or more); give catalogue B magnitudes"
        )
    u = u_all[sel] / u_all[sel].sum()
    c = (cB - cV)[sel]
    r = (bm - vm)[sel]
    ref_std = float(u @ c)
    ref_inst = float(u @ r)
    cat_var = eB[sel] ** 2 + eV[sel] ** 2
    inst_var = eb[sel] ** 2 + ev[sel] ** 2
    mu = coeffs.mu_bv
    s2 = _excess_variance(c - mu * r, cat_var + mu * mu * inst_var)
    ref_std_err = math.sqrt(float(np.sum(u**2 * (cat_var + s2))))
    n_sel = int(np.count_nonzero(sel))
    if s2 > 0 and n_sel >= 2:
        ref_std_err *= float(special.stdtrit(n_sel - 1, ONE_SIGMA_QUANTILE))
    ref_inst_err = math.sqrt(float(np.sum(u**2 * inst_var)))

    def pick(k: float, k_err: float, fallback: float, fallback_err: float, cref: float) -> tuple[float, float, float]:
        k, k_err, cref = float(k), float(k_err), float(cref)
        if math.isfinite(k):
            return k, (k_err if math.isfinite(k_err) else 0.0), cref
        return fallback, fallback_err, ref_std

    kb, kb_err, crb = pick(kappa_b, kappa_b_err, coeffs.k2_bv, coeffs.k2_bv_err, cref_b)
    kv, kv_err, crv = pick(kappa_v, kappa_v_err, 0.0, 0.0, cref_v)
    return NightReference(
        tie_colour_v=ref_std,
        ref_colour_std=ref_std,
        ref_colour_std_err=ref_std_err,
        ref_colour_inst=ref_inst,
        ref_colour_inst_err=ref_inst_err,
        kappa_b=kb,
        kappa_b_err=kb_err,
        kappa_v=kv,
        kappa_v_err=kv_err,
        cref_b=crb,
        cref_v=crv,
        cal_err_b=float(cal_err_b),
        cal_err_v=float(cal_err_v),
    )

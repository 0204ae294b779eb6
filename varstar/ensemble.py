"""Inhomogeneous ensemble solution for one band of one night.

The model is Honeycutt's (1992, PASP 104, 435) inhomogeneous ensemble: the
instrumental magnitude of star ``i`` in exposure ``j`` is

    m_ij = M_i + z_j + noise,

with one mean magnitude ``M_i`` per comparison star and one zero point ``z_j``
per exposure, solved by weighted least squares with missing data (a star may be
absent from any exposure).  The ``z_j`` are eliminated analytically, leaving an
``n_star x n_star`` system for the ``M_i`` (a Schur complement) whose one-
dimensional null space (a common shift of all ``M`` against all ``z``) is fixed
by a linear constraint.  The covariance of every parameter is computed exactly
from the same matrices, so the quoted zero-point errors are those of the full
least-squares problem.

Around that core (ideas from Everett & Howell 2001, PASP 113, 1428 and Broeg,
Fernandez & Neuhaeuser 2005, Astron. Nachr. 326, 134, iterative weights):

* weights ``1 / (mag_err^2 + e_i^2)`` with a per-star excess scatter ``e_i``
  fitted so that the star's reduced chi-square is one (zero if already <= 1);
* single outlying comparison measurements are clipped (at most one per exposure
  and iteration, since one outlier shifts the zero point seen by the others),
  judged against the reported errors and each star's robust scatter (median
  absolute deviation), never against the fitted excess, which outliers inflate;
  a clipped measurement returns once the solution agrees with it again;
* comparison stars whose scatter exceeds their errors are rejected one at a
  time, the worst first (a variable pollutes the zero points seen by the
  others), with a chi-square test of each star against the zero points of all
  the other stars, after dividing by a common error-scale factor (the ensemble
  median of chi2/dof, at least one), so that globally underestimated errors do
  not reject everybody;
* the ensemble is tied to the catalogue by a weighted mean of the offsets
  ``M_i - C_i`` whose weights contain an excess scatter of the catalogue
  offsets (the Paule & Mandel 1982 estimator, J. Res. NBS 87, 377, reference
  from memory) so that disagreeing catalogue values (untransformed colour
  terms) give an honest ``calibration_err``, widened to the Student-t 68.27%
  quantile when that scatter had to be estimated from few stars; stars whose
  offset is far from the others are marked ``catalog_offset`` and leave the
  tie (they still help the zero points);
* exposures are flagged, never dropped: too few comparisons, a zero-point error
  far above the night's median, or a zero point away from a robust smooth trend
  (extinction in airmass plus a linear drift in time), as a passing cloud does.

The module is a pure computational core: arrays in, a frozen dataclass out.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import asdict, dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy import special

from varstar.errors import InputError, ReductionError
from varstar.results import json_float as _json_float

__all__ = ["EnsembleSettings", "EnsembleSolution", "solve_ensemble"]

STAR_STATUSES = ("kept", "variable", "catalog_offset", "too_few_points", "not_comparison")
EXPOSURE_FLAGS = ("too_few_comparisons", "zero_point_error", "zero_point_jump")

# A diagonal hat value this close to one means the residual is fixed at zero
# (for example the only comparison star of an exposure): it carries no information.
_HAT_ONE = 1e-9
# The excess scatter has converged when no star's effective error sqrt(mag_err^2 + excess^2)
# changes by more than this fraction (weights by less than 2%; the weight model itself is
# uncertain by ~sqrt(2/dof), ten per cent for 200 points).
_EXCESS_RTOL = 1e-2
# A clipped measurement returns when it is within this fraction of clip_sigma of the current
# solution (hysteresis: a point near the threshold must not flip at every iteration).
_RESTORE_FRACTION = 0.8
# A star is called variable for its clipped points only if at least this many were clipped.
_MIN_CLIPS_VARIABLE = 5
# Upper quantile of a normal distribution at +1 sigma, Phi(1).
_ONE_SIGMA_QUANTILE = 0.8413447460685429
# Colour extinction is fitted only when the comparison stars' colours span this much
# (mag) and the airmass this much: otherwise the term is not constrained (common practice).
COLOUR_MIN_SPAN = 0.3
AIRMASS_MIN_SPAN = 0.1
# Normal-distribution consistency factor of the median absolute deviation.
_MAD_TO_SIGMA = 1.482602218505602


@dataclass(frozen=True)
class EnsembleSettings:
    """Settings of the ensemble solution; the defaults are common practice.

    Attributes
    ----------
    clip_sigma : float
        Clip a single comparison measurement whose normalised residual (in units
        of its expected scatter, with the star's robust scatter as a floor)
        exceeds this.
    variable_p_value : float
        A comparison star is called variable if the chi-square test of its
        residuals, after dividing by the ensemble's common error-scale factor
        (median chi2/dof of the ensemble, at least one), gives a probability
        below this ...
    variable_min_excess : float
        ... and its excess scatter over the scaled errors exceeds this (mag), so
        that a millimagnitude error-model mismatch of a bright star on a long
        night does not reject the best comparison star.
    max_clipped_fraction : float
        A comparison star with at least five clipped measurements and more than
        this fraction of its measurements clipped is also called variable (an
        eclipse looks like a run of outliers).  Clips made only because the two
        comparison stars of an exposure disagree do not count.
    catalog_sigma : float
        A comparison star's catalogue offset ``M_i - C_i`` inconsistent with the
        others by more than this many robust sigma ...
    catalog_min_mag : float
        ... and by more than this (mag) is marked ``catalog_offset`` (untransformed
        colour terms alone give a few 0.01 mag).
    min_comparisons : int
        Exposures with fewer comparison measurements are flagged
        ``too_few_comparisons``.
    min_star_points : int
        A comparison star with fewer usable measurements is ``too_few_points``.
    zp_err_factor : float
        Exposures whose zero-point error exceeds this times the night's median
        are flagged ``zero_point_error``.
    zp_jump_sigma : float
        Exposures whose zero point is away from the night's smooth trend by more
        than this many robust sigma ...
    zp_jump_min_mag : float
        ... and by more than this (mag) are flagged ``zero_point_jump``.
    trend_clip_sigma : float
        Exposures further than this many robust sigma from the trend do not enter
        the trend fit.
    max_iter : int
        Maximum number of least-squares solutions of the outer iteration.
    """

    clip_sigma: float = 5.0
    variable_p_value: float = 1e-4
    variable_min_excess: float = 0.003
    max_clipped_fraction: float = 0.03
    catalog_sigma: float = 5.0
    catalog_min_mag: float = 0.15
    min_comparisons: int = 2
    min_star_points: int = 1
    zp_err_factor: float = 4.0
    zp_jump_sigma: float = 5.0
    zp_jump_min_mag: float = 0.1
    trend_clip_sigma: float = 3.0
    max_iter: int = 30

    def __post_init__(self) -> None:
        positive = ("clip_sigma", "catalog_sigma", "zp_err_factor", "zp_jump_sigma", "trend_clip_sigma")
        for name in positive:
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and math.isfinite(value) and value > 0):
                raise InputError(f"ensemble setting {name} must be a positive number, got {value!r}")
        for name in ("variable_min_excess", "catalog_min_mag", "zp_jump_min_mag"):
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and math.isfinite(value) and value >= 0):
                raise InputError(f"ensemble setting {name} must be a number >= 0 (mag), got {value!r}")
        for name in ("variable_p_value", "max_clipped_fraction"):
            value = getattr(self, name)
            if not (isinstance(value, numbers.Real) and 0 < value < 1):
                raise InputError(f"ensemble setting {name} must lie strictly between 0 and 1, got {value!r}")
        for name in ("min_comparisons", "min_star_points", "max_iter"):
            value = getattr(self, name)
            if not (isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= 1):
                raise InputError(f"ensemble setting {name} must be an integer >= 1, got {value!r}")


@dataclass(frozen=True, eq=False)
class EnsembleSolution:
    """The ensemble solution of one band of one night.

    Attributes
    ----------
    zero_point : numpy.ndarray
        ``(n_exp,)`` calibrated zero points: standard magnitude = instrumental -
        ``zero_point[exposure]``; NaN where no comparison star was measured.
    zero_point_err : numpy.ndarray
        ``(n_exp,)`` statistical 1-sigma of each zero point (photometric noise
        of the whole least-squares problem, including the star excesses).
    calibration_err : float
        1-sigma of the tie of the ensemble to the catalogue, common to every
        exposure of the night and band (catalogue errors and the fitted excess
        scatter of the catalogue offsets); add it in quadrature for absolute
        magnitudes.  When the catalogue scatter had to be estimated from the
        offsets themselves it is widened to the 68.27% quantile of Student's t
        with ``n_tie - 1`` degrees of freedom, so that it still covers the
        truth in 68% of nights with few catalogue stars.
    n_comparisons : numpy.ndarray
        ``(n_exp,)`` comparison measurements used in each exposure.
    exposure_flags : tuple of str
        ``(n_exp,)`` ``""`` if good, else ``;``-joined codes from
        ``too_few_comparisons``, ``zero_point_error``, ``zero_point_jump``.
    star_status : tuple of str
        ``(n_star,)`` ``kept``, ``variable``, ``catalog_offset`` (kept for the zero
        points but not for the tie), ``too_few_points`` or ``not_comparison``.
    star_reason : tuple of str
        ``(n_star,)`` human-readable reason of a rejection, ``""`` otherwise.
    star_offset : numpy.ndarray
        ``(n_star,)`` mean calibrated magnitude minus catalogue (NaN without a
        catalogue value); for the fitted stars this is the fitted ``M_i`` minus
        the catalogue, on the calibrated scale.
    star_excess : numpy.ndarray
        ``(n_star,)`` extra scatter (mag) added in quadrature to the reported
        errors; for stars outside the fit a diagnostic computed the same way
        from their calibrated magnitudes.
    star_chi2_dof : numpy.ndarray
        ``(n_star,)`` reduced chi-square with the reported errors: for stars in
        the fit, of their magnitudes against the zero points of all the other
        stars (whose errors are included), about their mean; otherwise of the
        calibrated magnitudes about their weighted mean.
    mag, mag_err : numpy.ndarray
        ``(n_meas,)`` calibrated magnitude of every input measurement and
        ``sqrt(mag_err_in^2 + zero_point_err^2)``.
    used : numpy.ndarray
        ``(n_meas,)`` the measurement entered the final fit.
    clipped : numpy.ndarray
        ``(n_meas,)`` comparison measurement clipped as an outlier.
    tie_weight : numpy.ndarray
        ``(n_star,)`` normalised weights of the catalogue tie (zero outside it).
    catalog_scatter : float
        Fitted excess scatter of the catalogue offsets (mag).
    error_scale : float
        Common error-scale factor used by the variability test: the median
        reduced chi-square of the comparison stars with the reported errors,
        never below one.
    iterations : int
        Least-squares solutions computed.
    converged : bool
        The iteration reached a stable set of stars, clips and excesses.
    warnings : tuple of str
        Things a person should know (ambiguities that could not be resolved).
    settings : EnsembleSettings
        The settings used.
    colour_extinction, colour_extinction_err : float
        Fitted second-order (colour) extinction ``k''`` of the comparison stars
        in this band, mag per airmass per mag of catalogue colour, and its
        1-sigma; NaN when it was not fitted (see ``colour`` in
        :func:`solve_ensemble`).
    colour_reference : float
        The colour the zero points refer to: a star of this catalogue colour
        needs no colour-extinction correction (mean colour of the comparison
        stars with colours); NaN when not fitted.
    """

    zero_point: np.ndarray
    zero_point_err: np.ndarray
    calibration_err: float
    n_comparisons: np.ndarray
    exposure_flags: tuple[str, ...]
    star_status: tuple[str, ...]
    star_reason: tuple[str, ...]
    star_offset: np.ndarray
    star_excess: np.ndarray
    star_chi2_dof: np.ndarray
    mag: np.ndarray
    mag_err: np.ndarray
    used: np.ndarray
    clipped: np.ndarray
    tie_weight: np.ndarray = field(default_factory=lambda: np.zeros(0))
    catalog_scatter: float = 0.0
    error_scale: float = float("nan")
    iterations: int = 0
    converged: bool = True
    warnings: tuple[str, ...] = ()
    settings: EnsembleSettings = field(default_factory=EnsembleSettings)
    colour_extinction: float = float("nan")
    colour_extinction_err: float = float("nan")
    colour_reference: float = float("nan")

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe summary: per-star results, exposure flag counts, the tie.

        Returns
        -------
        dict
            Plain Python types only (NaN becomes ``None``); per-measurement arrays
            are not included.
        """
        stars = []
        for i, status in enumerate(self.star_status):
            stars.append(
                {
                    "index": i,
                    "status": status,
                    "reason": self.star_reason[i],
                    "offset": _json_float(self.star_offset[i]),
                    "excess": _json_float(self.star_excess[i]),
                    "chi2_dof": _json_float(self.star_chi2_dof[i]),
                    "tie_weight": _json_float(self.tie_weight[i]) if self.tie_weight.size else None,
                }
            )
        flags = [set(f.split(";")) if f else set() for f in self.exposure_flags]
        finite_err = self.zero_point_err[np.isfinite(self.zero_point_err)]
        exposures: dict[str, Any] = {
            "n_exposures": len(self.exposure_flags),
            "n_flagged": sum(1 for f in flags if f),
            "median_zero_point_err": _json_float(np.median(finite_err)) if finite_err.size else None,
        }
        for code in EXPOSURE_FLAGS:
            idx = [j for j, f in enumerate(flags) if code in f]
            exposures[code] = {"count": len(idx), "exposures": idx}
        return {
            "method": "inhomogeneous ensemble, weighted least squares (Honeycutt 1992)",
            "calibration_err": _json_float(self.calibration_err),
            "catalog_scatter": _json_float(self.catalog_scatter),
            "colour_extinction": _json_float(self.colour_extinction),
            "colour_extinction_err": _json_float(self.colour_extinction_err),
            "colour_reference": _json_float(self.colour_reference),
            "error_scale": _json_float(self.error_scale),
            "iterations": int(self.iterations),
            "converged": bool(self.converged),
            "n_measurements_used": int(np.count_nonzero(self.used)),
            "n_clipped": int(np.count_nonzero(self.clipped)),
            "status_counts": {s: self.star_status.count(s) for s in STAR_STATUSES},
            "stars": stars,
            "exposures": exposures,
            "warnings": list(self.warnings),
            "settings": {k: (v.item() if isinstance(v, np.generic) else v) for k, v in asdict(self.settings).items()},
        }


# --------------------------------------------------------------------------- input


def _as_index(a: Any, name: str, n_max: int, n_meas: int | None) -> np.ndarray:
    arr = np.asarray(a)
    if arr.ndim != 1:
        raise ReductionError(f"{name} must be a one-dimensional array of indices, got shape {arr.shape}")
    if n_meas is not None and arr.shape[0] != n_meas:
        raise ReductionError(
            f"{name} has {arr.shape[0]} entries but mag has {n_meas}: every measurement needs one "
            f"exposure index, star index, mag and mag_err"
        )
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        if not np.issubdtype(arr.dtype, np.floating) or not np.all(np.isfinite(arr)) or np.any(arr != np.round(arr)):
            raise ReductionError(f"{name} must hold integer indices, got dtype {arr.dtype}")
    arr = arr.astype(np.intp)
    if arr.size and (arr.min() < 0 or arr.max() >= n_max):
        bad = arr[(arr < 0) | (arr >= n_max)][0]
        raise ReductionError(f"{name} index {bad} is out of range 0..{n_max - 1}")
    return arr


def _as_float(a: Any, name: str, n: int, what: str) -> np.ndarray:
    arr = np.asarray(a, dtype=float)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise ReductionError(f"{name} must have one value per {what} ({n}), got shape {arr.shape}")
    return arr


def _label(i: int, names: Sequence[str] | None) -> str:
    return f"star {i}" if names is None else f"{names[i]!s}"


# --------------------------------------------------------------------------- core


@dataclass
class _Fit:
    """One weighted least-squares solution (mean-zero gauge over the fitted stars)."""

    M: np.ndarray  # (k,) star magnitudes, sum zero
    z: np.ndarray  # (n_exp,) exposure zero points (NaN without comparisons)
    CM: np.ndarray  # (k, k) covariance of M in that gauge
    P: np.ndarray  # (n_exp, k) weights normalised per exposure
    Wj: np.ndarray  # (n_exp,) total weight per exposure
    var_pred: np.ndarray  # (n_exp, k) variance of the prediction M_i + z_j (gauge invariant)


def _solve_weighted(W: np.ndarray, Y: np.ndarray) -> _Fit:
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
    _Fit
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
    return _Fit(M=M, z=z, CM=CM, P=P, Wj=Wj, var_pred=var_pred)


def _chi2_logsf(x: np.ndarray, dof: np.ndarray) -> np.ndarray:
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


def _colour_step(W: np.ndarray, U: np.ndarray, Dc: np.ndarray, R: np.ndarray) -> tuple[float, float]:
    """One exact least-squares step for the colour-extinction coefficient.

    ``R`` are the residuals of the ``M + z`` fit with the current coefficient
    removed.  By the Frisch-Waugh-Lovell theorem the joint weighted solution
    changes the coefficient by ``sum W R Dres / sum W Dres^2``, where ``Dres``
    is the part of the regressor ``Dc`` that ``M + z`` cannot absorb; the
    denominator's inverse is the coefficient's variance.

    Returns
    -------
    (step, err) : tuple of float
    """
    dfit = _solve_weighted(W, np.where(U, Dc, 0.0))
    dres = np.where(U, Dc - dfit.M - np.nan_to_num(dfit.z)[:, None], 0.0)
    denom = float(np.sum(W * dres * dres))
    if not denom > 0:
        return 0.0, float("nan")
    return float(np.sum(W * R * dres)) / denom, 1.0 / math.sqrt(denom)


def _zero_point_variance(fit: _Fit, CM: np.ndarray) -> np.ndarray:
    """``Var(z_j)`` for a star covariance ``CM`` given in some gauge."""
    has = fit.Wj > 0
    inv_Wj = np.divide(1.0, fit.Wj, out=np.full(fit.Wj.shape, np.nan), where=has)
    return inv_Wj + np.einsum("jk,jk->j", fit.P @ CM, fit.P)


def _solve_excess(r2: np.ndarray, s2: np.ndarray, dof: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
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


def _solve_excess_grouped(
    r2: np.ndarray, s2: np.ndarray, group: np.ndarray, n_groups: int, dof: np.ndarray
) -> np.ndarray:
    """As :func:`_solve_excess` for measurements labelled by ``group`` (via ``bincount``)."""
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
    lo, hi = 0.0, float(np.var(d)) * n + float(np.max(v))
    while q(hi) > 0:
        hi *= 4.0
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if q(mid) > 0:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-15 + 1e-12 * hi:
            break
    return 0.5 * (lo + hi)


@dataclass
class _StarTest:
    """Each fitted star against the zero points of all the other stars."""

    r2: np.ndarray  # (n_exp, k) squared residuals about the star's own mean (0 where unused)
    V: np.ndarray  # (n_exp, k) their variance if the star is constant: mag_err^2 + Var(z_others)
    mask: np.ndarray  # (n_exp, k) exposures where the star and at least one other were used
    chi2: np.ndarray  # (k,) sum r2 / V
    dof: np.ndarray  # (k,) points - 1


def _star_vs_others(W: np.ndarray, U: np.ndarray, Y: np.ndarray, S2: np.ndarray, fit: _Fit) -> _StarTest:
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
    return _StarTest(r2=r2, V=V, mask=mask, chi2=chi2, dof=dof)


def _components(present: np.ndarray) -> np.ndarray:
    """Connected-component label of each column (stars linked by shared exposures).

    Breadth-first growth on the small ``k x k`` link matrix; loops over the at
    most ``k`` components and ``k`` growth steps, never over measurements.
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


def _column_median(values: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Median of ``values`` over the ``mask``-ed entries of each column (NaN if none)."""
    n = mask.sum(axis=0)
    srt = np.sort(np.where(mask, values, np.inf), axis=0)
    lo = np.clip((n - 1) // 2, 0, None)
    hi = np.clip(n // 2, 0, None)
    cols = np.arange(values.shape[1])
    med = 0.5 * (srt[lo, cols] + srt[hi, cols])
    return np.where(n > 0, med, np.nan)


def _robust_scale_extra(r: np.ndarray, err: np.ndarray) -> float:
    """Extra scatter ``s`` with ``1.4826 median(|r| / sqrt(err^2 + s^2)) = 1``."""
    if r.size == 0:
        return 0.0

    def f(s: float) -> float:
        return _MAD_TO_SIGMA * float(np.median(np.abs(r) / np.sqrt(err**2 + s * s))) - 1.0

    if f(0.0) <= 0:
        return 0.0
    lo, hi = 0.0, _MAD_TO_SIGMA * float(np.median(np.abs(r))) + 1e-12
    while f(hi) > 0:
        hi *= 2.0
    for _ in range(100):
        mid = 0.5 * (lo + hi)
        if f(mid) > 0:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-12 + 1e-9 * hi:
            break
    return 0.5 * (lo + hi)


def _trend_jumps(
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
    n = zp.size
    jump = np.zeros(n, dtype=bool)
    ok = np.isfinite(zp) & np.isfinite(zp_err) & np.isfinite(time)
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
    A_all = np.column_stack(cols)
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
        s = _robust_scale_extra(r[inl], e[inl])
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


# --------------------------------------------------------------------------- public


def solve_ensemble(
    exposure: np.ndarray,
    star: np.ndarray,
    mag: np.ndarray,
    mag_err: np.ndarray,
    *,
    n_exposures: int,
    is_comparison: np.ndarray,
    catalog_mag: np.ndarray,
    catalog_err: np.ndarray,
    time: np.ndarray,
    airmass: np.ndarray,
    good: np.ndarray | None = None,
    settings: EnsembleSettings = EnsembleSettings(),
    star_names: Sequence[str] | None = None,
    colour: np.ndarray | None = None,
) -> EnsembleSolution:
    """Inhomogeneous ensemble solution of one band of one night (Honeycutt 1992).

    Parameters
    ----------
    exposure, star : numpy.ndarray
        ``(n_meas,)`` integer indices of each measurement's exposure
        (``0..n_exposures-1``) and star (``0..n_star-1``, ``n_star =
        len(is_comparison)``).  A star is measured at most once per exposure.
    mag, mag_err : numpy.ndarray
        ``(n_meas,)`` instrumental magnitudes and their 1-sigma errors.
        Comparison measurements with a non-finite magnitude or a non-positive
        error do not enter the fit.
    n_exposures : int
        Number of exposures of the night in this band.
    is_comparison : numpy.ndarray
        ``(n_star,)`` bool: the star may enter the ensemble.
    catalog_mag, catalog_err : numpy.ndarray
        ``(n_star,)`` catalogue magnitudes in this band (NaN: none; such a
        comparison star helps the zero points but not the tie) and their errors
        (NaN counts as zero; the fitted catalogue scatter still applies).
    time, airmass : numpy.ndarray
        ``(n_exposures,)`` time (days) and airmass of each exposure, for the
        zero-point trend.
    good : numpy.ndarray, optional
        ``(n_meas,)`` bool upstream quality; ``False`` never enters the fit but
        still gets a calibrated magnitude.
    settings : EnsembleSettings
        Thresholds and iteration limits.
    star_names : sequence of str, optional
        Names used in the human-readable reasons and warnings (default
        ``"star <index>"``).
    colour : numpy.ndarray, optional
        ``(n_star,)`` catalogue colour index (e.g. B - V) of each star, NaN if
        unknown.  When at least three comparison stars have colours spanning
        ``COLOUR_MIN_SPAN`` mag and the airmass changes by ``AIRMASS_MIN_SPAN``,
        the model gains one term, ``m_ij = M_i + z_j + k'' X_j (c_i - c_ref)``:
        second-order (colour) extinction, which otherwise makes a red
        comparison star drift against blue ones as the field sets and look
        variable (Henden & Kaitchuck 1982: the second-order term does not cancel
        in differential photometry).  Stars without a colour count as ``c_ref``.

    Returns
    -------
    EnsembleSolution

    Raises
    ------
    ReductionError
        Inconsistent input lengths or indices, no comparison star with a
        catalogue value, fewer than two comparison stars with usable data, or a
        star measured twice in one exposure.
    """
    # ---------------------------------------------------------------- validate
    mag = np.asarray(mag, dtype=float)
    if mag.ndim != 1:
        raise ReductionError(f"mag must be a one-dimensional array, got shape {mag.shape}")
    n_meas = mag.shape[0]
    if isinstance(n_exposures, bool) or not isinstance(n_exposures, (int, np.integer)) or n_exposures < 1:
        raise ReductionError(f"n_exposures must be a positive integer, got {n_exposures!r}")
    n_exp = int(n_exposures)
    is_comp = np.asarray(is_comparison)
    if is_comp.ndim != 1 or is_comp.size == 0:
        raise ReductionError("is_comparison must be a non-empty one-dimensional array with one entry per star")
    is_comp = is_comp.astype(bool)
    n_star = is_comp.size
    if star_names is not None and len(star_names) != n_star:
        raise ReductionError(f"star_names has {len(star_names)} names but is_comparison has {n_star} stars")
    exposure = _as_index(exposure, "exposure", n_exp, n_meas)
    star = _as_index(star, "star", n_star, n_meas)
    err = _as_float(mag_err, "mag_err", n_meas, "measurement")
    cat = _as_float(catalog_mag, "catalog_mag", n_star, "star (len(is_comparison))")
    cat_err = _as_float(catalog_err, "catalog_err", n_star, "star (len(is_comparison))")
    time = _as_float(time, "time", n_exp, "exposure (n_exposures)")
    airmass = _as_float(airmass, "airmass", n_exp, "exposure (n_exposures)")
    if good is None:
        good_arr = np.ones(n_meas, dtype=bool)
    else:
        good_arr = np.asarray(good)
        if good_arr.ndim != 1 or good_arr.shape[0] != n_meas:
            raise ReductionError(f"good must have one flag per measurement ({n_meas}), got shape {good_arr.shape}")
        good_arr = good_arr.astype(bool)
    cat_err = np.where(np.isfinite(cat_err), np.abs(cat_err), 0.0)
    has_cat = np.isfinite(cat)
    names = list(star_names) if star_names is not None else None
    if not np.any(is_comp & has_cat):
        raise ReductionError(
            "no comparison star has a catalogue magnitude in this band: give catalogue magnitudes for "
            "at least one (better three or more) comparison stars so the night can be calibrated"
        )

    warnings: list[str] = []
    candidate = is_comp[star] & good_arr & np.isfinite(mag) & np.isfinite(err) & (err > 0)
    n_unusable = int(np.count_nonzero(is_comp[star] & good_arr & ~candidate))
    if n_unusable:
        warnings.append(
            f"{n_unusable} comparison measurement(s) marked good have a non-finite magnitude or a "
            f"non-positive error and were left out of the fit"
        )

    comp_idx = np.flatnonzero(is_comp)
    col_of = np.full(n_star, -1, dtype=np.intp)
    col_of[comp_idx] = np.arange(comp_idx.size)
    k_all = comp_idx.size
    cm = np.flatnonzero(candidate)
    key = exposure[cm] * k_all + col_of[star[cm]]
    counts = np.bincount(key, minlength=n_exp * k_all)
    if np.any(counts > 1):
        dup = np.flatnonzero(counts > 1)[0]
        j, c = divmod(int(dup), k_all)
        raise ReductionError(
            f"{_label(int(comp_idx[c]), names)} is measured more than once in exposure {j}: "
            f"keep one measurement per star and exposure (or mark the others good=False)"
        )

    # dense (exposure x comparison star) arrays
    Y = np.zeros((n_exp, k_all))
    S2 = np.ones((n_exp, k_all))
    MI = np.full((n_exp, k_all), -1, dtype=np.intp)
    avail = np.zeros((n_exp, k_all), dtype=bool)
    rows, cols = exposure[cm], col_of[star[cm]]
    Y[rows, cols] = mag[cm]
    S2[rows, cols] = err[cm] ** 2
    MI[rows, cols] = cm
    avail[rows, cols] = True

    status = np.array(["not_comparison"] * n_star, dtype=object)
    reason = np.array([""] * n_star, dtype=object)
    status[comp_idx] = "kept"
    n_avail = avail.sum(axis=0)
    few = n_avail < settings.min_star_points
    for c in np.flatnonzero(few):
        status[comp_idx[c]] = "too_few_points"
        reason[comp_idx[c]] = (
            f"only {int(n_avail[c])} usable measurement(s); at least {settings.min_star_points} needed"
        )
    infit = ~few  # comparison columns in the fit

    def link_check(present: np.ndarray) -> None:
        """Keep only the largest linked group of stars (preferring one with catalogue values)."""
        cols_in = np.flatnonzero(infit)
        if cols_in.size < 2:
            return
        labels = _components(present[:, cols_in])
        if labels.max() == 0:
            return
        best, best_key = -1, (-1, -1)
        for lab in np.unique(labels):
            members = cols_in[labels == lab]
            key_ = (int(np.any(has_cat[comp_idx[members]])), int(present[:, members].sum()))
            if key_ > best_key:
                best, best_key = lab, key_
        for c in cols_in[labels != best]:
            infit[c] = False
            status[comp_idx[c]] = "too_few_points"
            reason[comp_idx[c]] = "never measured in the same exposure as the main ensemble"

    link_check(avail)
    if np.count_nonzero(infit) < 2:
        raise ReductionError(
            f"fewer than 2 comparison stars have usable data in this band ({int(np.count_nonzero(infit))} "
            f"of {k_all}): an ensemble needs at least two comparison stars measured in common exposures"
        )
    if not np.any(has_cat[comp_idx[infit]]):
        raise ReductionError(
            "none of the comparison stars with a catalogue magnitude has usable measurements in this band: "
            "the night cannot be tied to the catalogue"
        )

    # ---------------------------------------------------------------- colour extinction
    # D_ji = X_j (c_i - c_ref): the regressor of the single k'' term.  It is fitted jointly
    # with M and z by the Frisch-Waugh-Lovell step below (regress the residuals on the part
    # of D that M and z cannot absorb), which for fixed weights is the exact joint solution.
    D = np.zeros((n_exp, k_all))
    kappa, kappa_err, c_ref = 0.0, float("nan"), float("nan")
    fit_kappa = False
    if colour is not None:
        col = _as_float(colour, "colour", n_star, "star (len(is_comparison))")[comp_idx]
        has_col = np.isfinite(col)
        x_span = airmass[np.isfinite(airmass)]
        if (
            np.count_nonzero(has_col) >= 3
            and np.ptp(col[has_col]) >= COLOUR_MIN_SPAN
            and x_span.size >= 2
            and np.ptp(x_span) >= AIRMASS_MIN_SPAN
        ):
            fit_kappa = True
            c_ref = float(np.mean(col[has_col]))
            D = np.nan_to_num(airmass)[:, None] * np.where(has_col, col - c_ref, 0.0)[None, :]

    # ---------------------------------------------------------------- iterate

    clipped = np.zeros((n_exp, k_all), dtype=bool)
    pair_clipped = np.zeros((n_exp, k_all), dtype=bool)  # clipped only because two disagreed
    excess2 = np.zeros(k_all)
    iterations = 0
    converged = False
    error_scale = float("nan")
    pending_two_star: str | None = None

    cols_cached: np.ndarray | None = None
    relink = True
    while iterations < settings.max_iter:
        iterations += 1
        if relink:
            link_check(avail & infit[None, :] & ~clipped)
            if np.count_nonzero(infit) < 2:
                raise ReductionError(
                    "after clipping outliers fewer than 2 comparison stars remain linked by common "
                    "exposures: the night cannot be reduced with this ensemble; add comparison stars"
                )
        cols_in = np.flatnonzero(infit)
        if cols_cached is None or not np.array_equal(cols_cached, cols_in):
            cols_cached = cols_in
            S2c, Ac, Dc = S2[:, cols_in], avail[:, cols_in], D[:, cols_in]
        Yc = Y[:, cols_in] - kappa * Dc
        U = Ac & ~clipped[:, cols_in]
        W = np.where(U, 1.0 / (S2c + excess2[cols_in]), 0.0)
        fit = _solve_weighted(W, np.where(U, Yc, 0.0))
        R = np.where(U, Yc - fit.M - np.nan_to_num(fit.z)[:, None], 0.0)
        kappa_moved = False
        if fit_kappa:
            dk, kappa_err = _colour_step(W, U, Dc, R)
            kappa += dk
            kappa_moved = abs(dk) > 0.05 * kappa_err  # refit with it before judging the stars
        one_minus_h = np.where(U, np.clip(1.0 - W * np.nan_to_num(fit.var_pred), 0.0, 1.0), 0.0)
        informative = one_minus_h > _HAT_ONE
        R2 = np.where(informative, R * R, 0.0)
        s2_c = np.where(U, S2c, 1.0)
        # Residuals in units of the reported error (times sqrt(1 - h)), divided by each star's
        # robust scatter (never below one).  The fitted excess is left out on purpose: a few
        # wild points or an eclipse inflate it, and clipping must not depend on it.
        # Residuals are taken about each star's median residual: on a short night one wild point
        # pulls the star's fitted mean and with it all its other residuals.
        center = np.nan_to_num(_column_median(R, informative))
        with np.errstate(divide="ignore", invalid="ignore"):
            t_abs = np.where(informative, np.abs(R - center) / np.sqrt(S2c * one_minus_h), 0.0)
        rob = _MAD_TO_SIGMA * _column_median(t_abs, informative)
        rob = np.where(np.isfinite(rob), np.maximum(rob, 1.0), 1.0)
        tn = np.where(informative, t_abs / rob, -np.inf)
        worst = np.argmax(tn, axis=1)
        tmax = tn[np.arange(n_exp), worst]
        exceed = tmax > settings.clip_sigma
        n_row = U.sum(axis=1)
        new_clip = np.zeros_like(U)
        r_many = np.flatnonzero(exceed & (n_row >= 3))
        new_clip[r_many, worst[r_many]] = True
        r_two = exceed & (n_row == 2)  # two comparisons disagree: no way to tell which is wrong
        new_clip[r_two] = U[r_two]
        # Measurements clipped earlier (for example next to a wild point that pulled the zero
        # point in the first fit) come back when they agree with the current solution.  Their
        # statistic is the one they would have inside the fit: with prediction variance v and
        # weight w the in-fit residual is r / (1 + w v) and 1 - h = 1 / (1 + w v).
        old_clip = clipped[:, cols_in] & Ac
        restore = np.zeros_like(U)
        if old_clip.any():
            with np.errstate(invalid="ignore"):
                wv = fit.var_pred / (S2c + excess2[cols_in])
                t_old = np.abs(Yc - fit.M - fit.z[:, None] - center) / np.sqrt(S2c * (1.0 + wv)) / rob
            restore = old_clip & np.isfinite(t_old) & (t_old < _RESTORE_FRACTION * settings.clip_sigma)
        # Excess so that each star's reduced chi-square (with the hat-matrix dof) is one, from
        # the exposures without a newly found outlier (its pull on the zero point would inflate
        # the excess of every star measured there).
        clean_rows = ~new_clip.any(axis=1)[:, None]
        dof_clean = np.where(clean_rows, one_minus_h, 0.0).sum(axis=0)
        new_excess2 = _solve_excess(np.where(clean_rows, R2, 0.0), s2_c, dof_clean, excess2[cols_in])
        new_excess2 = np.where(dof_clean >= 1.0, new_excess2, excess2[cols_in])
        n_new_clips = int(np.count_nonzero(new_clip)) + int(np.count_nonzero(restore))
        if n_new_clips:
            sub = clipped[:, cols_in]
            clipped[:, cols_in] = (sub | new_clip) & ~restore
            pair = pair_clipped[:, cols_in]
            pair[r_two] |= U[r_two]
            pair_clipped[:, cols_in] = pair & clipped[:, cols_in]
        relink = n_new_clips > 0
        n_used_c = np.maximum(U.sum(axis=0), 1)
        typical_s2 = np.where(U, S2c, 0.0).sum(axis=0) / n_used_c
        eff_old = np.sqrt(typical_s2 + excess2[cols_in])
        delta = float(np.max(np.abs(np.sqrt(typical_s2 + new_excess2) - eff_old) / eff_old))
        excess2[cols_in] = new_excess2
        excess2[~infit] = 0.0
        if n_new_clips or delta > _EXCESS_RTOL or kappa_moved:
            continue  # not yet stable: refit before judging the stars
        # ------------------------------------------------ variability test
        st = _star_vs_others(W, U, Yc, S2c, fit)
        testable = st.dof >= 1.0
        red = st.chi2 / np.where(testable, st.dof, np.nan)
        n_in = cols_in.size
        # common error scale: the ensemble median of chi2/dof, never below one, so that globally
        # underestimated errors do not reject everybody while a chance low median (few stars,
        # short night) cannot make the test stricter than the reported errors
        red_ok = red[testable]
        error_scale = float(np.median(red_ok)) if n_in >= 3 and red_ok.size else 1.0
        error_scale = max(error_scale, 1.0)
        excess_scaled = np.sqrt(_solve_excess(st.r2, error_scale * st.V, np.where(testable, st.dof, 0.0)))
        stat = st.chi2 / error_scale
        with np.errstate(all="ignore"):
            logp = np.where(testable, _chi2_logsf(stat, np.maximum(st.dof, 1.0)), 0.0)
        # clips that only reflect two stars disagreeing in one exposure do not count against either
        n_clip_star = (clipped[:, cols_in] & ~pair_clipped[:, cols_in] & Ac).sum(axis=0)
        n_star_pts = Ac.sum(axis=0)
        clip_bad = (n_clip_star >= _MIN_CLIPS_VARIABLE) & (n_clip_star > settings.max_clipped_fraction * n_star_pts)
        chi_bad = (logp < math.log(settings.variable_p_value)) & (excess_scaled > settings.variable_min_excess)
        # rank by evidence: -ln p of the chi-square test; a run of 5-sigma outliers scores
        # roughly -ln p of that many Gaussian tail events (about 14 each)
        score = np.where(chi_bad, -logp, -np.inf)
        score = np.where(clip_bad, np.maximum(score, 14.0 * n_clip_star), score)
        bad = chi_bad | clip_bad
        if not np.any(bad):
            converged = True
            break
        if n_in <= 2:
            labels_ = " and ".join(_label(int(comp_idx[c]), names) for c in cols_in)
            pending_two_star = (
                f"only two comparison stars ({labels_}) are in the ensemble and they disagree beyond their "
                f"errors (chi2/dof {float(np.max(red_ok)) if red_ok.size else float('nan'):.1f}); one of them "
                f"may be variable but two stars cannot "
                f"tell which: add comparison stars"
            )
            converged = True
            break
        rejected = False
        for o in [int(np.argmax(score))]:
            c = cols_in[o]
            gi = int(comp_idx[c])
            remaining_cat = has_cat[comp_idx[cols_in]].copy()
            remaining_cat[o] = False
            if not np.any(remaining_cat):
                # the worst star cannot go; rejecting others it pollutes would be wrong, so stop
                warnings.append(
                    f"{_label(gi, names)} looks variable but is the last comparison star with a catalogue "
                    f"magnitude; it was kept for the tie to the catalogue: add comparison stars with "
                    f"catalogue magnitudes"
                )
                break
            infit[c] = False
            status[gi] = "variable"
            scale_txt = f", ensemble error scale {error_scale:.2f}" if n_in >= 3 else ""
            if chi_bad[o]:
                n_o = max(int(st.mask[:, o].sum()), 1)
                rms = math.sqrt(float(st.r2[:, o].sum()) / n_o)
                expected = math.sqrt(float(np.where(st.mask[:, o], st.V[:, o], 0.0).sum()) / n_o * error_scale)
                lp10 = float(logp[o]) / math.log(10.0)
                p_txt = "p<1e-30" if lp10 < -30 else f"p={10.0**lp10:.1e}"
                reason[gi] = (
                    f"scatter {rms:.3f} mag vs {expected:.3f} expected "
                    f"(chi2/dof {red[o] / error_scale:.1f}{scale_txt}, {p_txt})"
                )
            else:
                reason[gi] = (
                    f"{int(n_clip_star[o])} of {int(n_star_pts[o])} measurements are outliers beyond "
                    f"{settings.clip_sigma:g} sigma (an eclipse or flare looks like this)"
                )
            rejected = True
            break
        if not rejected:
            converged = True
            break
        # The rejected star's clips no longer matter; clips of the others that it caused are
        # undone by the restoration test in the next iterations, except pair clips (where
        # the two comparisons of an exposure disagreed), which are judged afresh.
        clipped[:, ~infit] = False
        clipped &= ~pair_clipped
        pair_clipped[:] = False
        relink = True
    if not converged:
        warnings.append(
            f"the ensemble iteration did not settle within max_iter={settings.max_iter} solutions; "
            f"results are from the last one"
        )
    if pending_two_star:
        warnings.append(pending_two_star)

    # ---------------------------------------------------------------- final solve with the reported excess
    cols_in = np.flatnonzero(infit)
    used = avail & infit[None, :] & ~clipped
    clipped &= infit[None, :]
    U = used[:, cols_in]
    W = np.where(U, 1.0 / (S2[:, cols_in] + excess2[cols_in][None, :]), 0.0)
    if fit_kappa:
        fit0 = _solve_weighted(W, np.where(U, Y[:, cols_in], 0.0))
        R0 = np.where(U, Y[:, cols_in] - fit0.M - np.nan_to_num(fit0.z)[:, None], 0.0)
        kappa, kappa_err = _colour_step(W, U, D[:, cols_in], R0)
    Yk = Y[:, cols_in] - kappa * D[:, cols_in]
    fit = _solve_weighted(W, np.where(U, Yk, 0.0))
    iterations += 1
    st = _star_vs_others(W, U, Yk, S2[:, cols_in], fit)

    # ---------------------------------------------------------------- tie to the catalogue
    gi_in = comp_idx[cols_in]
    var_M0 = np.diag(fit.CM)
    d = fit.M - cat[gi_in]  # NaN without catalogue
    tie = has_cat[gi_in].copy()
    s_cat2 = 0.0
    while True:
        v = cat_err[gi_in][tie] ** 2 + var_M0[tie]
        dd = d[tie]
        s_cat2 = paule_mandel(dd, v)
        n_tie = int(np.count_nonzero(tie))
        if n_tie < 2:
            break
        med = float(np.median(dd))
        sig_rob = _MAD_TO_SIGMA * float(np.median(np.abs(dd - med))) if n_tie >= 3 else 0.0
        thr = np.maximum(settings.catalog_min_mag, settings.catalog_sigma * np.sqrt(sig_rob**2 + v))
        ratio = np.abs(dd - med) / thr
        if n_tie == 2:
            if np.any(ratio > 1.0):
                a, b = (_label(int(g), names) for g in gi_in[tie])
                warnings.append(
                    f"the only two comparison stars with catalogue magnitudes ({a} and {b}) disagree by "
                    f"{abs(dd[0] - dd[1]):.3f} mag after the ensemble fit; two stars cannot tell which catalogue "
                    f"value is wrong: add comparison stars with catalogue magnitudes"
                )
            break
        o = int(np.argmax(ratio))
        if ratio[o] <= 1.0:
            break
        c_local = np.flatnonzero(tie)[o]
        gi = int(gi_in[c_local])
        tie[c_local] = False
        status[gi] = "catalog_offset"
        reason[gi] = (
            f"catalogue offset {dd[o] - med:+.3f} mag from the ensemble median "
            f"(robust sigma {sig_rob:.3f} mag; limit {thr[o]:.3f} mag); kept for the zero points, not for the tie"
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
    u = np.zeros(cols_in.size)
    u[tie] = 1.0 / (cat_err[gi_in][tie] ** 2 + var_M0[tie] + s_cat2)
    ubar = u / u.sum()
    # move to the gauge sum(ubar M) = 0: zero points then carry the tie's photometric noise exactly
    shift = float(ubar @ fit.M)
    T = np.eye(cols_in.size) - np.outer(np.ones(cols_in.size), ubar)
    CMt = T @ fit.CM @ T.T
    M_t = fit.M - shift
    cat_in = np.where(tie, cat[gi_in], 0.0)
    delta_tie = -float(ubar @ cat_in)
    zero_point = fit.z + shift + delta_tie
    with np.errstate(invalid="ignore"):
        zero_point_err = np.sqrt(_zero_point_variance(fit, CMt))
    zero_point = np.where(fit.Wj > 0, zero_point, np.nan)
    zero_point_err = np.where(fit.Wj > 0, zero_point_err, np.nan)
    calibration_err = math.sqrt(float(np.sum(ubar**2 * (cat_err[gi_in] ** 2 + s_cat2) * tie)))
    if s_cat2 > 0 and n_tie >= 2:
        # the catalogue scatter was estimated from the n_tie offsets themselves: the tie then
        # follows Student's t with n_tie - 1 degrees of freedom, so widen the error to the
        # t quantile that contains 68.27% (the "1 sigma" of a normal distribution)
        calibration_err *= float(special.stdtrit(n_tie - 1, _ONE_SIGMA_QUANTILE))

    # ---------------------------------------------------------------- per measurement
    zp_m = zero_point[exposure]
    cal = mag - zp_m
    cal_err = np.sqrt(err**2 + zero_point_err[exposure] ** 2)
    used_meas = np.zeros(n_meas, dtype=bool)
    used_meas[MI[used]] = True
    clipped_meas = np.zeros(n_meas, dtype=bool)
    clipped_meas[MI[clipped & avail]] = True

    # ---------------------------------------------------------------- per star
    star_offset = np.full(n_star, np.nan)
    star_excess = np.full(n_star, np.nan)
    star_chi2 = np.full(n_star, np.nan)
    star_offset[gi_in] = M_t - delta_tie - cat[gi_in]
    star_excess[gi_in] = np.sqrt(excess2[cols_in])
    star_chi2[gi_in] = np.where(st.dof >= 1.0, st.chi2 / np.maximum(st.dof, 1.0), np.nan)
    other = np.ones(n_star, dtype=bool)
    other[gi_in] = False
    valid = other[star] & good_arr & np.isfinite(cal) & np.isfinite(cal_err) & (cal_err > 0)
    if np.any(valid):
        sv, cv, ev = star[valid], cal[valid], cal_err[valid]
        w = 1.0 / ev**2
        sw = np.bincount(sv, w, minlength=n_star)
        nv = np.bincount(sv, minlength=n_star)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.bincount(sv, w * cv, minlength=n_star) / sw
            r2 = (cv - mean[sv]) ** 2
            ch = np.bincount(sv, w * r2, minlength=n_star)
            red_o = ch / (nv - 1)
        has_pts = nv >= 1
        star_offset[other & has_pts] = (mean - cat)[other & has_pts]
        multi = other & (nv >= 2)
        star_chi2[multi] = red_o[multi]
        ex2 = _solve_excess_grouped(r2, ev**2, sv, n_star, np.where(multi, nv - 1.0, 0.0))
        star_excess[multi] = np.sqrt(ex2[multi])

    # ---------------------------------------------------------------- exposure vetting
    n_comp = U.sum(axis=1).astype(int)
    few_exp = (n_comp < settings.min_comparisons) | (n_comp == 0)
    finite_err = zero_point_err[np.isfinite(zero_point_err)]
    med_err = float(np.median(finite_err)) if finite_err.size else float("nan")
    with np.errstate(invalid="ignore"):
        big_err = np.isfinite(zero_point_err) & (zero_point_err > settings.zp_err_factor * med_err)
    jump, note = _trend_jumps(zero_point, zero_point_err, time, airmass, settings)
    if note:
        warnings.append(note)
    flag_parts = np.stack([few_exp, big_err, jump], axis=1)
    flag_list = [""] * n_exp
    for j in np.flatnonzero(flag_parts.any(axis=1)):  # flagged exposures only (few)
        flag_list[j] = ";".join(c for c, f in zip(EXPOSURE_FLAGS, flag_parts[j]) if f)
    exposure_flags = tuple(flag_list)

    tie_weight = np.zeros(n_star)
    tie_weight[gi_in] = ubar

    def ro(a: np.ndarray) -> np.ndarray:
        a = np.asarray(a)
        a.setflags(write=False)
        return a

    return EnsembleSolution(
        zero_point=ro(zero_point),
        zero_point_err=ro(zero_point_err),
        calibration_err=calibration_err,
        n_comparisons=ro(n_comp),
        exposure_flags=exposure_flags,
        star_status=tuple(str(s) for s in status),
        star_reason=tuple(str(s) for s in reason),
        star_offset=ro(star_offset),
        star_excess=ro(star_excess),
        star_chi2_dof=ro(star_chi2),
        mag=ro(cal),
        mag_err=ro(cal_err),
        used=ro(used_meas),
        clipped=ro(clipped_meas),
        tie_weight=ro(tie_weight),
        catalog_scatter=math.sqrt(s_cat2),
        error_scale=error_scale,
        iterations=iterations,
        converged=converged,
        warnings=tuple(warnings),
        settings=settings,
        colour_extinction=kappa if fit_kappa else float("nan"),
        colour_extinction_err=kappa_err if fit_kappa else float("nan"),
        colour_reference=c_ref,
    )

"""The fit of the eclipse template (:mod:`varstar.period.template`): generalised least squares
with the nightly covariance, the frequency search, the knot choice and the errors.

:func:`solve_template` is the numerical core of
:func:`varstar.period.template.fit_template_period`: it locates the best basin
near the starting frequency, chooses the knots by AIC, converges the profile
chi-square in the frequency (variable projection) and forms the errors
(:class:`_Errors`: the model covariance or the sandwich estimate, whichever is
larger; the frequency error also from the profile's actual curvature).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve, lapack

from varstar.errors import ReductionError
from varstar.results import sd
from varstar.period.nightly import nightly_whitener
from varstar.period.template_basis import SplineDesign, periodic_spline
from varstar.period.template_knots import (
    MIN_KNOTS,
    pilot_fold,
    place_knots,
    scan_candidates,
    thin_knots,
    variation_density,
)

__all__ = ["SplineSolution", "solve_template"]

_ALPHAS = (0.0, 0.6, 0.9)  # weight of the variation density in the knot density
_MAX_KNOTS = 160
_KNOT_RATIO = 1.5  # coarse ladder of knot numbers: each 50 % more than the last
_PATIENCE = 2  # ladder steps without an AIC gain before a ladder is abandoned
_MIN_POINTS_PER_INTERVAL = 4
_COND_LIMIT = 1e11  # condition number of the (Jacobi-scaled) normal matrix
_LOCATOR_KNOTS = 200  # evenly spaced knots of the locating template (at most)
_LOCATOR_MAX_POINTS = 10_000  # points used to compare the basins
_MAX_ITER = 40


def _design(phase: np.ndarray, knots: np.ndarray) -> SplineDesign:
    """Design matrix of the periodic cubic B-spline with ``knots`` at ``phase``."""
    return SplineDesign(phase, knots)


# --------------------------------------------------------------------------- GLS core


class _Gls:
    """Generalised least squares with the nightly covariance of :mod:`varstar.period.nightly`.

    Residuals are whitened with the module's callable ``L`` (so the chi-square is
    ``|L r|^2``).  Normal equations are formed without whitening the ``N x K``
    design column by column: with ``C^-1 = L^T L = W - W P Gamma P^T W``
    (``P`` the point-to-night indicator, ``Gamma = diag(c_g^2 / (1 + c_g^2 s_g))``,
    the Sherman-Morrison form quoted in that module),

    ``B^T C^-1 B = B^T W B - H^T Gamma H``,  ``H = P^T W B``  (nights x K),

    which keeps the 4-non-zero rows of the spline design sparse: O(N K) work
    instead of O(N K^2).  ``Gamma`` is read off the whitener itself: for a vector
    of ones ``(L 1)_i = (1/dy_i) / sqrt(1 + c_g^2 s_g)``, so both modules use the
    same shared errors whatever form ``group_err`` was given in.
    """

    def __init__(self, y: np.ndarray, dy: np.ndarray, group: Any, group_err: Any) -> None:
        self.whiten = nightly_whitener(dy, group, group_err)
        self.w = dy**-2.0
        self.y, self.dy = y, dy
        self.group = None if group is None else np.asarray(group)
        self.active = bool(self.whiten.active)
        if self.active:
            codes = np.unique(self.group, return_inverse=True)[1].astype(np.intp).ravel()
            n_groups = int(codes.max()) + 1
            s = np.bincount(codes, weights=self.w, minlength=n_groups)
            shrink = (self.whiten(np.ones_like(y)) * dy) ** 2  # 1 / (1 + c_g^2 s_g), per point
            self.c_point = np.sqrt(np.maximum(1.0 / shrink - 1.0, 0.0) / s[codes])  # c_g of each point
            gamma_i = (1.0 - shrink) / s[codes]
            self.gamma = np.bincount(codes, weights=gamma_i, minlength=n_groups) / np.bincount(
                codes, minlength=n_groups
            )
            self.codes = codes

    def subset(self, idx: Any) -> "_Gls":
        """The same model for the points ``idx`` (their nights keep their shared errors)."""
        if not self.active:
            return _Gls(self.y[idx], self.dy[idx], None, None)
        return _Gls(self.y[idx], self.dy[idx], self.group[idx], self.c_point[idx])

    def cinv(self, v: np.ndarray) -> np.ndarray:
        """``C^-1 v`` for a vector."""
        wv = self.w * v
        if not self.active:
            return wv
        per_night = self.gamma * np.bincount(self.codes, weights=wv, minlength=self.gamma.size)
        return wv - self.w * per_night[self.codes]

    def normal(self, b: SplineDesign) -> np.ndarray:
        """``B^T C^-1 B`` (dense ``K x K``) for a spline design ``B`` (``N x K``)."""
        gram = b.gram(self.w)
        if self.active:
            h = b.grouped(self.w, self.codes, self.gamma.size)
            # einsum, not BLAS: a tiny product, which threaded BLAS makes several times slower
            gram -= np.einsum("gi,gj->ij", h, self.gamma[:, None] * h)
        return gram

    def bt_cinv(self, b: SplineDesign, v: np.ndarray) -> np.ndarray:
        """``B^T C^-1 v``."""
        return b.rmatvec(self.cinv(v))

    def chi2(self, r: np.ndarray) -> float:
        """Generalised chi-square ``|L r|^2`` of residuals ``r``."""
        rw = self.whiten(r)
        return float(rw @ rw)


def _chol(gram: np.ndarray):
    """Cholesky factor of the Jacobi-scaled normal matrix, or None when (nearly) singular.

    The condition number is LAPACK's estimate from the factor (``dpocon``, O(P^2)),
    far cheaper than an eigen-decomposition.
    """
    d = np.sqrt(np.diag(gram))
    if not np.all(d > 0):
        return None
    gs = gram / np.outer(d, d)
    try:
        cho = cho_factor(gs, lower=False, check_finite=False)
    except LinAlgError:
        return None
    rcond, info = lapack.dpocon(cho[0], float(np.abs(gs).sum(axis=0).max()), uplo="U")
    if info != 0 or not rcond > 1.0 / _COND_LIMIT:
        return None
    return cho, d


def _solve(fac, rhs: np.ndarray) -> np.ndarray:
    cho, d = fac
    return (cho_solve(cho, (rhs.T / d).T, check_finite=False).T / d).T


@dataclass(frozen=True, eq=False)
class _Profile:
    chi2: float
    coef: np.ndarray
    resid: np.ndarray
    design: SplineDesign
    gram: np.ndarray
    fac: Any


def _profile(gls: _Gls, tau: np.ndarray, f: float, knots: np.ndarray) -> _Profile | None:
    """Exact GLS template at fixed ``f``: coefficients, chi-square and residuals (None if singular)."""
    b = _design(np.mod(f * tau, 1.0), knots)
    gram = gls.normal(b)
    fac = _chol(gram)
    if fac is None:
        return None
    coef = _solve(fac, gls.bt_cinv(b, gls.y))
    resid = gls.y - b @ coef
    chi2 = gls.chi2(resid)
    return _Profile(chi2, coef, resid, b, gram, fac)


def _freq_column(tau: np.ndarray, f: float, knots: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Derivative of the model with respect to ``f``: ``S'(phi) (t - t_ref)``."""
    return periodic_spline(knots, coef).derivative()(np.mod(f * tau, 1.0)) * tau


def _joint_normal(gls: _Gls, prof: _Profile, j: np.ndarray) -> np.ndarray:
    """Normal matrix ``J^T C^-1 J`` of the parameters ``(c_0 .. c_{K-1}, f)``."""
    cj = gls.cinv(j)
    k = prof.gram.shape[0]
    out = np.empty((k + 1, k + 1))
    out[:k, :k] = prof.gram
    out[:k, k] = out[k, :k] = prof.design.rmatvec(cj)
    out[k, k] = j @ cj
    return out


def _gauss_newton(gls, tau, f, knots, prof, *, max_iter: int = _MAX_ITER, max_halvings: int = 30):
    """Minimise the profile chi-square over ``f`` (variable projection, step halving)."""
    converged = False
    for _ in range(max_iter):
        j = _freq_column(tau, f, knots, prof.coef)
        cj = gls.cinv(j)
        cross = prof.design.rmatvec(cj)
        schur = float(j @ cj - cross @ _solve(prof.fac, cross))  # = (d^2 chi2/df^2) / 2
        if not schur > 0:
            break
        df = float(cj @ prof.resid) / schur  # B^T C^-1 r = 0 at the profile optimum
        sigma = 1.0 / math.sqrt(schur)
        if abs(df) < 1e-4 * sigma:
            converged = True
            break
        accepted = False
        for _ in range(max_halvings):
            trial = _profile(gls, tau, f + df, knots)
            if trial is not None and trial.chi2 <= prof.chi2 * (1.0 + 1e-12) + 1e-12:
                f, prof, accepted = f + df, trial, True
                break
            df *= 0.5
            if abs(df) < 1e-4 * sigma:
                break
        if not accepted:
            converged = abs(df) < 1e-4 * sigma
            break
    return f, prof, converged


def _aic(chi2: float, n_points: int, n_par: int) -> float:
    """Akaike's criterion for Gaussian errors whose stated covariance has a free overall scale."""
    return n_points * math.log(chi2 / n_points) + 2.0 * n_par


def _select_knots(gls, tau, f, variation, has, n_points):
    """Knot set of smallest AIC over the mixing weights and knot numbers.

    A coarse ladder of knot numbers (each ``_KNOT_RATIO`` times the last) is
    climbed for every mixing weight until ``_PATIENCE`` steps bring no gain; the
    best knot number is then refined halfway (in ratio) to its neighbours.
    Returns ``(aic, knots, profile, alpha, requested knot number)`` and the largest
    knot number allowed.
    """
    n_max = int(min(_MAX_KNOTS, (n_points - 2) // 3))
    if n_max < MIN_KNOTS:
        raise ReductionError(
            f"template fit: {n_points} points cannot constrain a template of {MIN_KNOTS} knots "
            "and a frequency; more data are needed"
        )
    ladder = []
    k = MIN_KNOTS
    while k <= n_max:
        ladder.append(k)
        k = max(k + 1, int(round(k * _KNOT_RATIO)))
    phase_sorted = np.sort(np.mod(f * tau, 1.0))
    seen: dict[tuple, float] = {}
    best = None  # (aic, knots, profile, alpha, requested knot number)

    def evaluate(alpha: float, k: int) -> float:
        nonlocal best
        kn = thin_knots(place_knots(variation, has, alpha, k), phase_sorted, _MIN_POINTS_PER_INTERVAL)
        key = tuple(kn)
        if kn.size < 4:
            return math.inf
        if key in seen:  # thinning can map different requests onto one knot set
            return seen[key]
        prof = _profile(gls, tau, f, kn)
        aic = math.inf if prof is None else _aic(prof.chi2, n_points, kn.size + 1)
        seen[key] = aic
        if prof is not None and (best is None or aic < best[0]):
            best = (aic, kn, prof, alpha, k)
        return aic

    alphas = [a for a in _ALPHAS if a == 0 or variation.sum() > 0]
    for alpha in alphas:
        stale, best_alpha = 0, math.inf
        for k in ladder:
            aic = evaluate(alpha, k)
            if aic < best_alpha:
                best_alpha, stale = aic, 0
            else:
                stale += 1
                if stale >= _PATIENCE:
                    break
    if best is not None:
        _, _, _, alpha, k = best
        half = math.sqrt(_KNOT_RATIO)
        for k2 in {int(round(k / half)), int(round(k * half))}:
            if MIN_KNOTS <= k2 <= n_max and k2 != k:
                evaluate(alpha, k2)
    if best is None:
        raise ReductionError(
            "template fit: every candidate template gave a singular normal matrix; the "
            "phases covered by the data are too few for a template"
        )
    return best, n_max


def _search(gls: _Gls, tau: np.ndarray, y: np.ndarray, w: np.ndarray, f0: float, span: float):
    """Locate the best basin near ``f0``, choose the knots there and converge.

    1. The broken-line fold scan gives a few starting frequencies (:func:`.template_knots.scan_candidates`).
    2. Around each, the profile chi-square of a template with EVENLY spaced knots
       is evaluated on a grid of +-2 scan steps and the best point refined by
       Gauss-Newton.  Even knots matter here: knots fitted to one trial fold fit
       that fold best and pull the frequency towards it, which can keep the
       search in a neighbouring basin when each eclipse was seen on few nights.
    3. At the best of these the knots are chosen (:func:`_select_knots`), the fit
       converged, then the knots are placed once more on the fold at the converged
       frequency and the fit converged again; the better of the two is kept.

    Returns ``f, knots, profile, alpha, converged, k_max, rivals`` where
    ``rivals`` lists ``(AIC difference, frequency)`` of the other basins.
    """
    n = tau.size
    starts, step, n_bins = scan_candidates(tau, y - np.sum(w * y) / np.sum(w), w, f0, span)
    # comparing basins needs no more than _LOCATOR_MAX_POINTS points (every k-th one)
    sub = np.arange(0, n, max(1, math.ceil(n / _LOCATOR_MAX_POINTS)))
    gls_sub, tau_sub = (gls, tau) if sub.size == n else (gls.subset(sub), tau[sub])
    n_sub = sub.size
    k_even = int(np.clip(n_sub // 10, MIN_KNOTS, _LOCATOR_KNOTS))
    basins = []  # (aic, f)
    for f_start in starts:  # a few starting frequencies
        phase_sorted = np.sort(np.mod(f_start * tau_sub, 1.0))
        even = thin_knots(np.arange(k_even) / k_even, phase_sorted, _MIN_POINTS_PER_INTERVAL)
        grid = f_start + np.arange(-3, 4) * (2.0 * step / 3.0)
        profiles = [(g, _profile(gls_sub, tau_sub, g, even)) for g in grid if g > 0]
        profiles = [(g, p) for g, p in profiles if p is not None]
        if not profiles:
            continue
        g_best, p_best = min(profiles, key=lambda gp: gp[1].chi2)
        # a few steps suffice to compare basins; the chosen one is converged below
        f_fit, p_fit, _ = _gauss_newton(gls_sub, tau_sub, g_best, even, p_best, max_iter=3, max_halvings=3)
        basins.append((_aic(p_fit.chi2, n_sub, even.size + 1), f_fit))
    if not basins:
        raise ReductionError(
            "template fit: every candidate template gave a singular normal matrix; the "
            "phases covered by the data are too few for a template"
        )
    basins.sort()
    aic_loc, f_loc = basins[0]
    # AIC differences of the subsample, scaled to all points
    rivals = [((a - aic_loc) * n / n_sub, fr) for a, fr in basins[1:] if abs(fr - f_loc) > 0.25 / span]

    best = None
    f_pilot = f_loc
    for round_ in range(2):  # knots on the located fold, then once more on the converged one
        mean, err, has = pilot_fold(tau, y, w, f_pilot, n_bins)
        variation = variation_density(mean, err, has)
        if round_ == 0:
            (_, knots, prof, alpha, k_request), k_max = _select_knots(gls, tau, f_pilot, variation, has, n)
        else:
            phase_sorted = np.sort(np.mod(f_pilot * tau, 1.0))
            knots = thin_knots(place_knots(variation, has, alpha, k_request), phase_sorted, _MIN_POINTS_PER_INTERVAL)
            prof = _profile(gls, tau, f_pilot, knots)
            if prof is None:
                break
        f_fit, p_fit, conv = _gauss_newton(gls, tau, f_pilot, knots, prof)
        aic = _aic(p_fit.chi2, n, knots.size + 1)
        if best is None or aic < best[0]:
            best = (aic, f_fit, knots, p_fit, conv)
        f_pilot = f_fit
    _, f, knots, prof, converged = best
    return f, knots, prof, alpha, converged, k_max, rivals



class _Errors:
    """Errors of linear functions ``g . theta`` of the parameters ``theta = (c, f)``.

    Two estimates are formed and the larger is reported:

    * the model covariance ``chi2/dof (J^T C^-1 J)^-1``, right when the template
      follows the curve and the (nightly) covariance is right up to a scale;
    * the sandwich (heteroscedasticity-consistent) covariance of Huber (1967,
      Proc. Fifth Berkeley Symp. 1, 221) and White (1980, Econometrica 48, 817),
      ``M J_w^T diag(r_w^2) J_w M`` with ``M = (J^T C^-1 J)^-1``, whitened
      design ``J_w = L J`` and whitened residuals ``r_w``, times ``N/dof``
      (MacKinnon & White 1985, J. Econometrics 29, 305, "HC1").  It stays
      consistent when the template cannot follow the curve exactly: the misfit
      is largest where the curve is steepest, which is where the timing
      information is, and a single reduced chi-square over all points dilutes it.

    For ``g`` the sandwich variance is ``N/dof sum_i (a_i r_w,i)^2`` with
    ``a = L J (M g)``: one whitening of one vector per quantity.
    """

    def __init__(
        self,
        gls: _Gls,
        design: SplineDesign,
        j: np.ndarray,
        resid: np.ndarray,
        m_inv: np.ndarray,
        scale: float,
        dof: int,
    ) -> None:
        self.gls, self.design, self.j = gls, design, j
        self.rw = gls.whiten(resid)
        self.m_inv = m_inv
        self.cov = m_inv * scale
        self.hc_factor = resid.size / dof
        self.k = design.k

    def model_var(self, g: np.ndarray) -> float:
        return float(g @ self.cov @ g)

    def sandwich_var(self, g: np.ndarray) -> float:
        v = self.m_inv @ g
        a = self.gls.whiten(self.design @ v[: self.k] + self.j * v[self.k])
        return float(np.sum((a * self.rw) ** 2)) * self.hc_factor

    def __call__(self, g: np.ndarray) -> float:
        if not np.all(np.isfinite(g)):
            return float("nan")
        var = max(self.model_var(g), self.sandwich_var(g))
        return sd(var)



# --------------------------------------------------------------------------- the fit


@dataclass(frozen=True, eq=False)
class SplineSolution:
    """The converged template and its errors, as :func:`solve_template` returns them.

    Attributes
    ----------
    frequency, frequency_err : float
        Fitted frequency (cycles/day) and its error (the largest of the profile's
        curvature, the model covariance and the sandwich estimate).
    t_ref : float
        Weighted mean time, the phase origin.
    tau : np.ndarray
        ``t - t_ref`` of every point.
    knots, coefficients : np.ndarray
        Knot phases in [0, 1) and spline coefficients.
    resid : np.ndarray
        Data less template.
    chi2, dof, reduced_chi2, aic : float, int, float, float
        Generalised chi-square, degrees of freedom, their ratio (the factor on the
        covariance) and Akaike's criterion of the chosen template.
    alpha : float
        Weight of the variation density in the knot placement.
    converged : bool
        Whether the Gauss-Newton iterations met their tolerance.
    k_max : int
        Largest knot number the data allowed.
    rivals : list of (float, float)
        ``(AIC difference, frequency)`` of the other basins of the locator.
    errors : callable
        ``errors(g)``: 1-sigma error of the linear function with gradient ``g`` in
        ``(c_0 .. c_{K-1}, f)``.
    covariance : np.ndarray
        Model covariance of ``(c, f)`` scaled by the reduced chi-square.
    n_nights : int
        Nights with a shared calibration error (0 without).
    """

    frequency: float
    frequency_err: float
    t_ref: float
    tau: np.ndarray
    knots: np.ndarray
    coefficients: np.ndarray
    resid: np.ndarray
    chi2: float
    dof: int
    reduced_chi2: float
    aic: float
    alpha: float
    converged: bool
    k_max: int
    rivals: list
    errors: Callable[[np.ndarray], float]
    covariance: np.ndarray
    n_nights: int


def solve_template(
    t: np.ndarray, y: np.ndarray, dy: np.ndarray, f0: float, span: float, group: Any, group_err: Any
) -> SplineSolution:
    """Fit the periodic spline template with free frequency to checked arrays.

    Parameters
    ----------
    t, y, dy : np.ndarray
        Times (days), magnitudes and errors, already checked.
    f0 : float
        Starting frequency (cycles/day).
    span : float
        Time span of the data (days).
    group, group_err : array_like or None
        Night labels and shared calibration errors (:func:`.nightly.nightly_whitener`).

    Raises
    ------
    ReductionError
        When no template can be fitted or the frequency cannot be separated from the shape.
    """
    gls = _Gls(y, dy, group, group_err)
    w = dy**-2.0
    t_ref = float(np.sum(w * t) / np.sum(w))
    tau = t - t_ref
    n = t.size

    f, knots, prof, alpha, converged, k_max, rivals = _search(gls, tau, y, w, f0, span)

    if f <= 0:
        raise ReductionError("template fit: the frequency ran to zero or below; start from a better peak")

    k = knots.size
    n_par = k + 1
    dof = n - n_par
    if dof <= 0:
        raise ReductionError(f"template fit: {n} points cannot constrain {n_par} parameters")
    chi2 = prof.chi2
    scale = chi2 / dof
    j = _freq_column(tau, f, knots, prof.coef)
    fac = _chol(_joint_normal(gls, prof, j))  # J^T C^-1 J
    if fac is None:
        raise ReductionError(
            "template fit: the normal matrix of template and frequency is singular; the "
            "sampling cannot separate the period from the shape"
        )
    m_inv = _solve(fac, np.eye(n_par))
    errors = _Errors(gls, prof.design, j, prof.resid, m_inv, scale, dof)
    e_f = np.zeros(n_par)
    e_f[k] = 1.0
    # the profile chi-square's own curvature, by a central difference over +-2 sigma
    h = 2.0 * math.sqrt(m_inv[k, k] * scale)
    sides = [_profile(gls, tau, f + s * h, knots) for s in (-1.0, 1.0)]
    var_curv = float("nan")
    if all(p is not None for p in sides):
        curvature = (sides[0].chi2 - 2.0 * chi2 + sides[1].chi2) / h**2
        if curvature > 0:
            var_curv = 2.0 / curvature * scale
    f_err = math.sqrt(max(errors(e_f) ** 2, var_curv if math.isfinite(var_curv) else 0.0))
    return SplineSolution(
        frequency=f,
        frequency_err=f_err,
        t_ref=t_ref,
        tau=tau,
        knots=knots,
        coefficients=prof.coef,
        resid=prof.resid,
        chi2=chi2,
        dof=dof,
        reduced_chi2=scale,
        aic=_aic(chi2, n, n_par),
        alpha=alpha,
        converged=converged,
        k_max=k_max,
        rivals=rivals,
        errors=errors,
        covariance=errors.cov,
        n_nights=gls.whiten.n_groups,
    )

"""Period of a strictly periodic star from a template of its own folded curve.

A Fourier series of a few harmonics (:mod:`varstar.period.refine`) cannot follow
the narrow eclipses of a detached binary: what it leaves in the residuals is
periodic, so the fitted period is pulled wherever the sampling of the eclipses is
uneven, and its covariance error, which assumes the model is right, is far too
small.  This module fits a model flexible enough to follow such a curve.

Model
-----
The magnitude at time ``t`` is a periodic cubic B-spline ``S`` of the phase

.. math::

    y(t) = S(\\varphi), \\qquad \\varphi = f\\,(t - t_{ref}) \\bmod 1,
    \\qquad S(\\varphi) = \\sum_{j=0}^{K-1} c_j B_j(\\varphi),

with ``K`` knots in one cycle (de Boor 1978, *A Practical Guide to Splines*,
Springer; evaluated with :class:`scipy.interpolate.BSpline`, periodic extension,
so ``S`` is twice continuously differentiable across phase 0).  The ``K``
coefficients ``c_j`` are linear parameters, the frequency ``f`` the only
non-linear one.  ``t_ref`` is the weighted mean time (weights ``1/dy**2``): at
that reference a change of ``f`` pivots the fold about the middle of the data, so
the eclipses stay where the knots were put and ``f`` is almost uncorrelated with
``c``.

Knots
-----
Equally spaced knots waste parameters on the flat parts of a detached binary and
still miss the eclipses.  The knots are therefore placed by equidistribution of
a density, the idea of de Boor's knot placement (de Boor 1978): a first fold at
the located frequency is binned, its bin-to-bin variation in excess of the noise
(spread over +-2 bins so that eclipse bottoms get knots too) is the density,
mixed with a uniform density over the phases that hold data, and the knots are
put at equal quantiles of the mixture.  A mixing weight ``alpha = 0`` gives
equally spaced knots (right for a smooth pulsator), ``alpha`` near 1 puts most
knots in the eclipses.  Knots are then removed until every knot interval holds
at least four folded points (a cubic piece over fewer
points than its four local degrees of freedom overshoots in a gap of the phase
coverage).  For ``alpha`` in (0, 0.6, 0.9) and a ladder of knot numbers ``K``
(6, 9, 14, 21, ..., each 50 % more than the last, at most 160 and a third of
the points; each ladder abandoned after two steps without a gain, and the best
knot number then refined halfway in ratio to its neighbours) the knot set with
the smallest Akaike information criterion

.. math::

    \\mathrm{AIC} = N \\ln(\\chi^2 / N) + 2P, \\qquad P = K + 1,

is kept (Akaike 1974, IEEE Trans. Autom. Control 19, 716).  This is ``-2 ln L``
(up to a constant) for Gaussian errors whose stated covariance, nightly terms
included, has a free overall scale: the same assumption as the reduced-chi-square
factor on the covariance below.  With honest errors (``chi2 ~ N``) it is
``chi2 + 2P`` to first order; with errors that are all too small or too large by
a common factor, as photometric errors often are, the choice of ``K`` does not
change.

AIC rather than BIC: no spline is the true light curve, and under such
misspecification AIC is the criterion that minimises the expected prediction
error (BIC is consistent only when the true model is among the candidates, and
its ``ln N`` penalty grows with the data while the template's shortfall in the
eclipses does not shrink).  For the period the asymmetry matters too: a template
that is too stiff leaves systematic residuals that bias the timing of the
eclipses, while a few surplus knots only add a little variance, nearly
orthogonal to the frequency.

Fit and errors
--------------
1. *Locator.*  The starting frequency may be off by up to about ``0.5/T``
   (``T`` the time span), which smears narrow eclipses completely, so a grid of
   frequencies over ``+-0.75/T`` is scanned with the chi-square of a broken-line
   (piecewise-linear) fold, plain ``1/dy**2`` weights and at most 10,000 points;
   its three deepest local minima are starting points.  Around each, the
   generalised profile chi-square of a template with evenly spaced knots is
   evaluated on a grid of +-2 scan steps and refined by a few Gauss-Newton
   steps, and the best basin by AIC is kept (see ``_search`` in :mod:`.template_fit` for why the
   knots are even here).  Another basin within 10 in AIC is reported as a
   warning (an ambiguous cycle count), as is a fit in which no minimum was
   observed in more than one cycle (the period is then not fixed by the data).
2. *Profile fit.*  For a trial ``f`` the coefficients are solved exactly by
   generalised least squares; the profile ``chi2(f)`` is minimised by
   Gauss-Newton steps on ``f`` with the analytic derivative
   ``dy/df = S'(phi) (t - t_ref)`` (variable projection, Golub & Pereyra 1973,
   SIAM J. Numer. Anal. 10, 413), halving a step that does not lower ``chi2``.
3. *Covariance.*  Every residual is whitened with
   :func:`varstar.period.nightly.nightly_whitener`, and every normal matrix is
   the one of the whitened design (formed in the structured way described in
   ``_Gls`` of :mod:`.template_fit`), i.e. the covariance of the data is ``diag(dy**2)`` plus
   ``c_g**2`` shared by all points of night ``g``.
   The model covariance of ``(c, f)`` is ``(J^T C^-1 J)^-1`` at the solution,
   **always multiplied by the reduced chi-square** ``chi2/dof`` as in
   :mod:`varstar.period.refine`.  Its frequency element is the Gauss-Newton
   form of ``2 / (d^2 chi2 / df^2)`` for the profile chi-square; the profile's
   actual curvature (central difference over +-2 sigma) is a few per cent
   flatter in our simulations.
   The actual curvature is flatter because the exact second derivative of a
   variable-projection functional has a second-order term that the Gauss-Newton
   form leaves out (Golub & Pereyra 1973).  Every error is the larger of this
   model error and the sandwich error (see ``_Errors`` in :mod:`.template_fit`), which stays right when
   the template cannot follow the curve exactly; the frequency error is in
   addition at least ``sqrt(2 chi2/dof / (d^2 chi2/df^2))`` from the actual
   curvature.
   ``period_err = frequency_err / f**2``.

Derived quantities
------------------
Magnitudes grow as the star fades, so the *primary minimum* is the minimum where
the template reaches its LARGEST value, the *secondary* the other local maximum
of ``S`` of largest topographic prominence (height above the saddle joining it
to the primary), reported only when that prominence exceeds three times its
error.  The time of a minimum is its mid-point by the bisector of
chords (common practice in eclipse timing): at levels of 20, 30, ... 80 % of the
minimum's depth the template's ingress and egress crossings are found and their
mid-points averaged.  For a symmetric minimum this is the phase of the largest
magnitude itself, but it is measured on the steep branches, where the timing
information is; the exact top of a flexible template wanders with the noise at
the flat bottom of an eclipse.  A level counts only where both its crossings lie
among data (no empty phase stretch there longer than 1/8 of the half-depth
width).  The error comes from the covariance through the implicit-function
derivatives of the crossings (``dphi/dc = (dlevel/dc - B(phi)) / S'(phi)``) and
``dt/df = -phi/f**2``; the epoch reported is the one nearest ``t_ref``.  (For
the asymmetric minimum of a pulsating star the bisector mid-point is not the
time of the faintest point.)

A minimum is measured only when the folded data cover it: its part deeper than
half its depth must hold points with no empty stretch longer than a third of its
width.  A minimum seen only on its ingress or only on its egress is not
determined by the data (the template just bridges the gap, and no model error
can say by how much it is wrong), so its epoch, depth and phase are NaN with a
warning; the period does not need it.  Depths are measured from the brightest
point of the template (its smallest value), with errors by the envelope theorem
(the extremum positions do not move the values to first order).  The phase of
the secondary after the primary is 0.5 for a circular orbit.

Code
----
This module holds the result and the entry point; the pieces are
:mod:`.template_basis` (the periodic B-spline basis), :mod:`.template_knots`
(locator scan and knot placement), :mod:`.template_fit` (generalised least
squares, frequency search, knot choice, errors) and :mod:`.template_minima`
(extrema, coverage, bisector mid-phases).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from varstar.errors import InputError, ReductionError
from varstar.results import Result
from varstar.period._common import check_series
from varstar.period.template_basis import periodic_spline
from varstar.period.template_fit import solve_template
from varstar.period.template_knots import MIN_KNOTS
from varstar.period.template_minima import measure_minima

__all__ = ["TemplateFit", "fit_template_period"]

_RIVAL_AIC = 10.0  # a rival frequency closer than this in AIC is reported


# --------------------------------------------------------------------------- result


@dataclass(frozen=True, eq=False)
class TemplateFit(Result):
    """A periodic spline template with free frequency, fitted by generalised least squares.

    Attributes
    ----------
    method : str
        The model and the error treatment in words.
    frequency, frequency_err : float
        Fitted frequency (cycles/day) and its 1-sigma error: the largest of the
        profile chi-square's curvature and the model covariance (both scaled by
        the reduced chi-square) and the sandwich estimate (module docstring).
    period, period_err : float
        ``1/frequency`` (days) and ``frequency_err / frequency**2``.
    t_ref : float
        Reference time of the phases (weighted mean time of the data).
    epoch_min_light, epoch_min_light_err : float
        Time of primary minimum nearest ``t_ref``: the bisector mid-point of the
        minimum where the template reaches its LARGEST magnitude (for a symmetric
        minimum, the time of that largest magnitude).  NaN when the data leave a
        gap in that minimum (see the warnings).
    primary_depth, primary_depth_err : float
        Depth of the primary minimum below the brightest point of the template
        (mag); NaN with the epoch.
    secondary_depth, secondary_depth_err : float
        The same for the second minimum (the most prominent other one); NaN when
        the template has none, when it is not significant (prominence below 3
        sigma) or when the data leave a gap in it.
    secondary_phase, secondary_phase_err : float
        Phase of the secondary's mid-point after the primary's, in [0, 1).
    ptp_amplitude, ptp_amplitude_err : float
        Peak-to-peak amplitude of the template (faintest minus brightest
        magnitude); its error is NaN when the faintest part is not covered.
    n_knots : int
        Knots of the periodic cubic spline (= its coefficients).
    knot_alpha : float
        Weight of the variation density in the knot placement (0: equally spaced).
    knots : tuple of float
        Knot phases in [0, 1) (relative to ``t_ref``).
    n_parameters : int
        ``n_knots + 1`` (the frequency).
    aic : float
        Akaike information criterion of the chosen template,
        ``N ln(chi2 / N) + 2 n_parameters``.
    chi2, dof, reduced_chi2, rms : float, int, float, float
        Generalised chi-square, degrees of freedom, chi2/dof (the factor applied to
        the covariance) and the unweighted rms of the residuals (mag).
    n_points, n_nights : int
        Measurements and nights with a shared calibration error (0 without).
    converged : bool
        Whether the Gauss-Newton iterations met their tolerance.
    warnings : tuple of str
    coefficients, covariance : np.ndarray
        Spline coefficients and the model covariance of ``(c_0 .. c_{K-1}, f)``
        scaled by the reduced chi-square (the reported errors may be larger).
    """

    method: str
    frequency: float
    frequency_err: float
    period: float
    period_err: float
    t_ref: float
    epoch_min_light: float
    epoch_min_light_err: float
    primary_depth: float
    primary_depth_err: float
    secondary_depth: float
    secondary_depth_err: float
    secondary_phase: float
    secondary_phase_err: float
    ptp_amplitude: float
    ptp_amplitude_err: float
    n_knots: int
    knot_alpha: float
    knots: tuple[float, ...]
    n_parameters: int
    aic: float
    chi2: float
    dof: int
    reduced_chi2: float
    rms: float
    n_points: int
    n_nights: int
    converged: bool
    warnings: tuple[str, ...]
    coefficients: np.ndarray = field(repr=False)
    covariance: np.ndarray = field(repr=False)

    _json_exclude = ("coefficients", "covariance")

    def model(self, t: Any) -> np.ndarray:
        """Template magnitudes at times ``t`` (same time system as the fitted data)."""
        t = np.asarray(t, dtype=float)
        phase = np.mod(self.frequency * (t.ravel() - self.t_ref), 1.0)
        spl = periodic_spline(np.asarray(self.knots), self.coefficients)
        return spl(phase).reshape(t.shape)


def fit_template_period(
    t: Any,
    y: Any,
    dy: Any,
    frequency: float,
    *,
    group: Any = None,
    group_err: Any = None,
) -> TemplateFit:
    """Refine the period of a strictly periodic star with a spline template of its own curve.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days, BJD_TDB), magnitudes and their 1-sigma errors.
    frequency : float
        Starting frequency (cycles/day), within about ``0.5/T`` of the truth (``T``
        the time span), e.g. a periodogram's peak.  For an eclipsing binary give
        the ORBITAL frequency (one primary and one secondary eclipse per cycle).
    group : array_like, optional
        Night label of each point (any hashable values); with ``group_err`` the
        points of a night share a calibration error.  None: independent points.
    group_err : array_like, optional
        Shared 1-sigma error of each night (one value per distinct label in sorted
        order, or one per point), see :func:`varstar.period.nightly.nightly_whitener`.

    Returns
    -------
    TemplateFit
        See the class and the module docstring for the model and the errors.

    Raises
    ------
    InputError
        Bad arrays, non-finite values, non-positive errors, a non-positive
        frequency or inconsistent night labels.
    ReductionError
        Too few points for a template and a frequency, a data span of zero, or
        phases too sparsely covered for any template.
    """
    t, y, dy = check_series(t, y, dy, min_points=2 * MIN_KNOTS + 2, what="template fit")
    try:
        f0 = float(frequency)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"template fit: the starting frequency must be a number (got {frequency!r})"
        ) from exc
    if not (math.isfinite(f0) and f0 > 0):
        raise InputError(f"template fit: the starting frequency must be positive (got {frequency!r})")
    span = float(t.max() - t.min())
    if not span * f0 >= 1.0:
        raise ReductionError(
            f"template fit: the data span {span:.4g} d, less than one cycle of the starting period "
            f"{1 / f0:.4g} d; a template fit needs the curve to repeat"
        )
    if np.ptp(y) == 0.0:
        raise ReductionError("template fit: the magnitudes are all equal; there is no curve to fit")

    if group is None and group_err is not None:
        raise InputError("template fit: group_err (nightly calibration errors) needs group (night labels)")
    sol = solve_template(t, y, dy, f0, span, group, group_err)
    f, knots = sol.frequency, sol.knots
    k = knots.size
    n_par = k + 1
    mm = measure_minima(knots, sol.coefficients, f, sol.tau, sol.t_ref, sol.errors)

    warnings: list[str] = []
    if abs(f - f0) > 0.5 / span:
        warnings.append(
            f"the frequency moved from {f0:.6f} to {f:.6f} c/d, more than half the resolution "
            f"1/T = {1 / span:.6f} c/d: the starting peak may have been an alias"
        )
    if not sol.converged:
        warnings.append("the Gauss-Newton iterations on the frequency did not meet their tolerance")
    close = [(d, fr) for d, fr in sol.rivals if d < _RIVAL_AIC]
    if close:
        d, fr = min(close)
        warnings.append(
            f"another frequency, {fr:.6f} c/d, fits almost as well (AIC higher by only {d:.1f}): "
            "the cycle count between the observed minima is ambiguous, and the error does not "
            "include this; more data in other cycles would decide"
        )
    if k >= sol.k_max:
        warnings.append(
            f"the template uses the largest knot number allowed ({k}); the curve may have "
            "structure finer than the template can follow"
        )
    if not mm.primary_covered:
        warnings.append(
            "the data leave a gap in the deepest minimum (its ingress, bottom or egress is "
            "missing): its epoch and depth are not determined and are reported as NaN"
        )
    if mm.secondary_note:
        warnings.append(mm.secondary_note)
    if mm.cycles_seen < 2:
        warnings.append(
            "no minimum was observed in more than one cycle: the period is not fixed by repeated "
            "minima and its error is not reliable"
        )

    nights, alpha = sol.n_nights, sol.alpha
    method = (
        f"periodic cubic B-spline template in phase ({k} knots, placed "
        + ("evenly" if alpha == 0 else f"by equidistribution with weight {alpha:g} on the curve's variation")
        + ", number chosen by AIC) with free frequency; generalised least squares"
        + (f" with shared calibration errors of {nights} nights" if nights else " with weights 1/dy^2")
        + "; errors from the covariance scaled by the reduced chi-square (frequency: also the "
        "profile chi-square's curvature) or the sandwich estimate, whichever is larger"
    )
    return TemplateFit(
        method=method,
        frequency=f,
        frequency_err=sol.frequency_err,
        period=1.0 / f,
        period_err=sol.frequency_err / f**2,
        t_ref=sol.t_ref,
        epoch_min_light=mm.epoch_min_light,
        epoch_min_light_err=mm.epoch_min_light_err,
        primary_depth=mm.primary_depth,
        primary_depth_err=mm.primary_depth_err,
        secondary_depth=mm.secondary_depth,
        secondary_depth_err=mm.secondary_depth_err,
        secondary_phase=mm.secondary_phase,
        secondary_phase_err=mm.secondary_phase_err,
        ptp_amplitude=mm.ptp_amplitude,
        ptp_amplitude_err=mm.ptp_amplitude_err,
        n_knots=int(k),
        knot_alpha=float(alpha),
        knots=tuple(float(v) for v in knots),
        n_parameters=int(n_par),
        aic=float(sol.aic),
        chi2=float(sol.chi2),
        dof=int(sol.dof),
        reduced_chi2=float(sol.reduced_chi2),
        rms=float(np.sqrt(np.mean(sol.resid**2))),
        n_points=int(t.size),
        n_nights=int(nights),
        converged=bool(sol.converged),
        warnings=tuple(warnings),
        coefficients=sol.coefficients.copy(),
        covariance=sol.covariance,
    )

"""Time of an extremum from the star's own mean light curve shifted in time (pure core).

:func:`template_fit` does not assume a symmetric extremum, so it suits the
asymmetric maxima of pulsating stars; it is the ``"mean-curve template"``
entry of :data:`varstar.timings.estimators.ESTIMATORS`, and the main estimate
of a maximum in :func:`varstar.timings.search.find_timings` when the star's
mean curve is known.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError, ReductionError
from ..results import Result, sd
from .checks import series

__all__ = ["MEAN_CURVE_TEMPLATE", "TemplateFit", "template_fit"]

#: The method's name in results, in the archive's ``method`` column and in the estimator table.
MEAN_CURVE_TEMPLATE = "mean-curve template"


@dataclass(frozen=True)
class TemplateFit(Result):
    """Time of an extremum from the star's own mean light curve shifted in time.

    Attributes
    ----------
    time, err
        Fitted time of the template's extremum (BJD_TDB) and its 1-sigma error from the
        least-squares covariance, scaled by the reduced chi-square when that exceeds 1.
    offset, scale
        Magnitude offset and amplitude factor of the fitted template.
    chi2, dof, n_points
    method
        ``"mean-curve template"``.
    """

    time: float
    err: float
    offset: float
    scale: float
    chi2: float
    dof: int
    n_points: int
    method: str = MEAN_CURVE_TEMPLATE


def template_fit(t: Any, mag: Any, mag_err: Any, template: Any, t_guess: float, *, max_shift: float) -> TemplateFit:
    """Fit ``mag = offset + scale * template(t - t0)`` for ``t0``, ``offset`` and ``scale``.

    ``template(x)`` is the star's mean light curve (magnitudes) as a function of the
    time ``x`` from its extremum, e.g. a harmonic fit of all the star's data.  Unlike
    :func:`~varstar.timings.kvw.kwee_van_woerden` and
    :func:`~varstar.timings.symmetric_polynomial.symmetric_fit` this does not assume a symmetric
    extremum, so it suits the asymmetric maxima of pulsating stars (a steep rise and a
    slow decline), where a symmetric method times the centre of symmetry instead
    (common practice: timings of pulsators from a fitted mean curve).  The shift is
    searched within ``t_guess +- max_shift`` (days).
    """
    from scipy.optimize import least_squares

    if mag_err is None:
        raise InputError("template fit: magnitude errors are needed (they weight the fit)")
    t, mag, err = series(t, mag, mag_err, what="template fit", min_points=4)
    w = 1.0 / err
    tt = t - t_guess
    if not callable(template):
        raise InputError("template fit: 'template' must be a function of the time from the extremum")
    # start: best shift on a grid (the least-squares surface can have side minima)
    grid = np.linspace(-max_shift, max_shift, 41)
    best = None
    for g in grid:
        m = np.asarray(template(tt - g), dtype=float)
        a = np.vstack([np.ones_like(m), m]).T * w[:, None]
        coef, *_ = np.linalg.lstsq(a, mag * w, rcond=None)
        r = float(np.sum((a @ coef - mag * w) ** 2))
        if best is None or r < best[0]:
            best = (r, g, coef)
    _, g0, (c0, s0) = best
    x0 = np.array([g0, c0, s0])

    def resid(p):
        return (p[1] + p[2] * np.asarray(template(tt - p[0]), dtype=float) - mag) * w

    sol = least_squares(resid, x0, x_scale=np.array([max(max_shift, 1e-6) / 10, 0.01, 0.1]), method="lm")
    dof = t.size - 3
    if dof < 1 or not sol.success:
        raise ReductionError(f"template fit: no solution ({sol.message if not sol.success else 'too few points'})")
    chi2 = float(np.sum(sol.fun**2))
    try:
        cov = np.linalg.inv(sol.jac.T @ sol.jac)
    except np.linalg.LinAlgError:
        raise ReductionError("template fit: the shift is not constrained by these points") from None
    cov *= max(1.0, chi2 / dof)
    shift = float(sol.x[0])
    if abs(shift) > 1.5 * max_shift or not math.isfinite(cov[0, 0]) or sol.x[2] <= 0:
        raise ReductionError("template fit: the fitted shift left the window or the template came out inverted")
    return TemplateFit(t_guess + shift, sd(cov[0, 0]), float(sol.x[1]), float(sol.x[2]), chi2, dof, int(t.size))

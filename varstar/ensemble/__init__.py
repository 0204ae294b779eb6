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

The package is a pure computational core: arrays in, a frozen dataclass out.
Its modules, in the order :func:`solve_ensemble` uses them:

* ``settings``: :class:`EnsembleSettings`;
* ``inputs``: input checks, the dense exposure x comparison arrays, linking;
* ``linear``: the weighted least-squares solve, zero-point variances, the
  colour-extinction term;
* ``vetting``: excess scatter, each star against the others, robust scales,
  connected stars, zero-point trend jumps and exposure flags;
* ``iteration``: the outer iteration (clips, excesses, rejections) and the
  final solve;
* ``tie``: the tie to the catalogue (:func:`paule_mandel`);
* ``solution``: :class:`EnsembleSolution`;
* ``solve``: :func:`solve_ensemble`, a short sequence of those steps.
"""

from varstar.ensemble.linear import AIRMASS_MIN_SPAN, COLOUR_MIN_SPAN
from varstar.ensemble.settings import EnsembleSettings
from varstar.ensemble.solution import EXPOSURE_FLAGS, STAR_STATUSES, EnsembleSolution
from varstar.ensemble.solve import solve_ensemble
from varstar.ensemble.tie import paule_mandel

__all__ = [
    "AIRMASS_MIN_SPAN",
    "COLOUR_MIN_SPAN",
    "EXPOSURE_FLAGS",
    "STAR_STATUSES",
    "EnsembleSettings",
    "EnsembleSolution",
    "paule_mandel",
    "solve_ensemble",
]

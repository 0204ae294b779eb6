"""Times of minimum and maximum, O - C and ephemeris fits (pure core).

Arrays in, frozen dataclasses out; nothing here reads files, prints or knows
about the archive.  All times are BJD_TDB (days); magnitudes are magnitudes, so
a *minimum of light* (an eclipse) is a *maximum of magnitude*.

The pieces
----------
* :mod:`.ephemeris`: :class:`Ephemeris` ``T(E) = T0 + P E + Q E**2`` and
  :func:`ephemeris_from_table` (a target's ``[ephemeris]`` TOML table);
  :func:`predict_extrema` and :func:`o_minus_c`; :func:`fit_ephemeris`,
  weighted linear and quadratic ephemerides from timings, with an F-test for
  the quadratic term and the period change.
* :mod:`.estimators`: the estimators of the time of an extremum from one
  night, in a table chosen by name (:data:`~.estimators.ESTIMATORS`):
  :func:`kwee_van_woerden` (Kwee & van Woerden 1956, BAN 12, 327; module
  :mod:`.kvw`, whose docstring explains its error),
  :func:`symmetric_fit` (a symmetric polynomial in ``(t - t0)**2`` with a
  bootstrap error; :mod:`.symmetric_polynomial`) and :func:`template_fit`
  (the star's own mean light curve shifted in time, for the asymmetric maxima
  of pulsating stars; :mod:`.mean_curve`).
* :mod:`.coverage`: :func:`check_coverage`, the rules deciding whether a
  night covers a predicted extremum well enough to time it.
* :mod:`.search`: :func:`find_timings`, which applies two estimators to every
  covered extremum of a night and returns the timings and, for the others, a
  plain reason.
* :mod:`.checks`: the input checks the modules share.
"""

from __future__ import annotations

from .checks import KINDS
from .coverage import Coverage, check_coverage
from .ephemeris import (
    BJD_PLAUSIBLE,
    DAYS_PER_YEAR,
    SECONDS_PER_DAY,
    Ephemeris,
    EphemerisFit,
    PolynomialEphemeris,
    ephemeris_from_table,
    fit_ephemeris,
    o_minus_c,
    predict_extrema,
)
from .kvw import KweeVanWoerden, kwee_van_woerden
from .mean_curve import TemplateFit, template_fit
from .search import ASYMMETRY_PVALUE, DISAGREE_SIGMA, Refusal, Timing, disagreements, find_timings
from .symmetric_polynomial import SymmetricFit, symmetric_fit

__all__ = [
    "ASYMMETRY_PVALUE",
    "BJD_PLAUSIBLE",
    "DAYS_PER_YEAR",
    "DISAGREE_SIGMA",
    "KINDS",
    "SECONDS_PER_DAY",
    "Coverage",
    "Ephemeris",
    "EphemerisFit",
    "KweeVanWoerden",
    "PolynomialEphemeris",
    "Refusal",
    "SymmetricFit",
    "TemplateFit",
    "Timing",
    "check_coverage",
    "disagreements",
    "ephemeris_from_table",
    "find_timings",
    "fit_ephemeris",
    "kwee_van_woerden",
    "o_minus_c",
    "predict_extrema",
    "symmetric_fit",
    "template_fit",
]

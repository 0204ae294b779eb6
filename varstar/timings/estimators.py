"""The estimators of the time of an extremum, chosen by name (pure core).

One function per method, each in its own module, and one table from the
method's name to the function, as a periodogram package keeps its variants in
a table chosen by name:

``"kwee-van-woerden"``
    :func:`~varstar.timings.kvw.kwee_van_woerden` (Kwee & van Woerden 1956,
    BAN 12, 327): reflected branches, a parabola through S(T), and the error
    from the effective number of independent pairs.
``"symmetric-polynomial"``
    :func:`~varstar.timings.symmetric_polynomial.symmetric_fit`: a polynomial
    in ``(t - t0)**2`` with a bootstrap error.
``"mean-curve template"``
    :func:`~varstar.timings.mean_curve.template_fit`: the star's own mean
    light curve shifted in time (asymmetric maxima of pulsating stars).

The names are those results carry in ``method`` and that the archive stores in
its ``/timings`` table.  Every estimator takes ``(t, mag, mag_err, **options)``
and returns a result with ``time``, ``err`` (days) and ``method``; the
options differ (see each function), and :func:`estimate` passes them through.

Both symmetric estimators assume a symmetric extremum.  For an asymmetric one
they time the centre of symmetry of the data, not the extremum; the S_min of
Kwee & van Woerden, compared with what the magnitude errors explain
(:attr:`~varstar.timings.kvw.KweeVanWoerden.asymmetry`), detects that, and
:func:`~varstar.timings.search.find_timings` adds a note.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from types import MappingProxyType
from typing import Any

from ..errors import InputError
from .kvw import KWEE_VAN_WOERDEN, kwee_van_woerden
from .mean_curve import MEAN_CURVE_TEMPLATE, template_fit
from .symmetric_polynomial import SYMMETRIC_POLYNOMIAL, symmetric_fit

__all__ = [
    "ESTIMATORS",
    "KWEE_VAN_WOERDEN",
    "MEAN_CURVE_TEMPLATE",
    "SYMMETRIC_POLYNOMIAL",
    "estimate",
    "estimator",
]

#: Method name -> estimator function (read-only).
ESTIMATORS: Mapping[str, Callable[..., Any]] = MappingProxyType(
    {
        KWEE_VAN_WOERDEN: kwee_van_woerden,
        SYMMETRIC_POLYNOMIAL: symmetric_fit,
        MEAN_CURVE_TEMPLATE: template_fit,
    }
)


def estimator(name: str) -> Callable[..., Any]:
    """The estimator function called ``name``.

    Raises
    ------
    InputError
        For an unknown name, listing the known ones.
    """
    try:
        return ESTIMATORS[name]
    except (KeyError, TypeError):  # TypeError: an unhashable name
        known = ", ".join(repr(k) for k in ESTIMATORS)
        raise InputError(f"unknown extremum estimator {name!r}; the known ones are {known}") from None


def estimate(name: str, t: Any, mag: Any, mag_err: Any = None, **options: Any) -> Any:
    """Time one extremum with the estimator called ``name``.

    Parameters
    ----------
    name
        A key of :data:`ESTIMATORS`.
    t, mag, mag_err
        One extremum (days, mag, mag); ``mag_err`` is optional only for
        Kwee & van Woerden.
    **options
        Passed to the estimator: ``rng`` and ``n_boot`` for the symmetric
        polynomial, ``template``, ``t_guess`` and ``max_shift`` for the
        mean-curve template, for example.

    Returns
    -------
    The estimator's result (:class:`~varstar.timings.kvw.KweeVanWoerden`,
    :class:`~varstar.timings.symmetric_polynomial.SymmetricFit` or
    :class:`~varstar.timings.mean_curve.TemplateFit`): ``time``, ``err``,
    ``method`` and the method's own diagnostics.

    Raises
    ------
    InputError
        Unknown name, or what the estimator refuses.
    ReductionError
        When the estimator finds no extremum to time.
    """
    return estimator(name)(t, mag, mag_err, **options)

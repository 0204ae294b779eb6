"""The timings of a night: every predicted extremum timed or refused with a reason (pure core).

:func:`find_timings` predicts the extrema inside one night's data from the
ephemeris, asks :func:`~varstar.timings.coverage.check_coverage` whether each
is covered, and times the covered ones with two estimators chosen by name from
:data:`~varstar.timings.estimators.ESTIMATORS`: Kwee & van Woerden with the
symmetric polynomial as the independent check, or, for a maximum when the
star's mean curve is known, the mean-curve template with Kwee & van Woerden as
the check.  Each extremum gives a :class:`Timing` or a :class:`Refusal`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError, ReductionError
from ..results import Result
from .checks import check_kind, series
from .coverage import check_coverage
from .ephemeris import Ephemeris, predict_extrema
from .estimators import KWEE_VAN_WOERDEN, MEAN_CURVE_TEMPLATE, SYMMETRIC_POLYNOMIAL, estimate
from .kvw import KweeVanWoerden

__all__ = ["ASYMMETRY_PVALUE", "DISAGREE_SIGMA", "MIN_FOR_USUAL_OFFSET", "Refusal", "Timing", "disagreements", "find_timings"]

#: Two estimates of one time "disagree" beyond this many combined standard errors.
DISAGREE_SIGMA = 3.0
#: How many timings of one band, type and pair of methods give the usual offset between the two
#: estimates (their median difference); with fewer, the estimates are compared as they are (our choice).
MIN_FOR_USUAL_OFFSET = 3
#: A timing gets an asymmetry note when Kwee & van Woerden's asymmetry p-value is below this
#: (about 0 of 300 symmetric simulated minima reach it; a skewed maximum reaches 1e-100).
ASYMMETRY_PVALUE = 1e-3
#: The estimators of a timing, (main, check), by name: the usual pair, and the pair
#: for a maximum when the star's mean light curve is given.
SYMMETRIC_PAIR = (KWEE_VAN_WOERDEN, SYMMETRIC_POLYNOMIAL)
TEMPLATE_PAIR = (MEAN_CURVE_TEMPLATE, KWEE_VAN_WOERDEN)


@dataclass(frozen=True)
class Timing(Result):
    """One measured time of an extremum.

    Attributes
    ----------
    bjd_tdb, err
        The main estimate and its standard error (days): Kwee & van Woerden, or for a
        maximum with a template the mean-curve template fit.
    method
        ``"kwee-van-woerden"`` or ``"mean-curve template"``.
    band, night
        Where it comes from.
    type
        ``"primary"``, ``"secondary"`` or ``"maximum"``.
    cycle
        E (half-integer for a secondary minimum).
    o_minus_c
        Observed minus the ephemeris' time for E (days).
    predicted_bjd_tdb
        The ephemeris' time for E.
    check_method, check_bjd_tdb, check_err
        The independent estimate (symmetric polynomial, or Kwee & van Woerden beside a
        template fit; NaN if it failed).
    disagree
        ``|bjd_tdb - check_bjd_tdb| > DISAGREE_SIGMA * sqrt(err^2 + check_err^2)``.
        Both estimates use the same points, so their difference scatters less
        than ``sqrt(err^2 + check_err^2)``: a flag is a real warning
        (asymmetric extremum, outliers, trends), not a 1-in-370 fluctuation.
    n_points
        Points used by the estimators.
    n_pairs
        Kwee & van Woerden's effective Z.
    asymmetry
        Kwee & van Woerden's S_min over what the magnitude errors explain (~1
        for a symmetric extremum; see :class:`KweeVanWoerden`).  A note is
        added when its p-value is below ``ASYMMETRY_PVALUE``.
    depth
        Depth (minimum) or height (maximum) of the extremum seen in the window (mag).
    note
        Anything the reader should know (empty otherwise).
    """

    bjd_tdb: float
    err: float
    method: str
    band: str
    night: str
    type: str
    cycle: float
    o_minus_c: float
    predicted_bjd_tdb: float
    check_method: str
    check_bjd_tdb: float
    check_err: float
    disagree: bool
    n_points: int
    n_pairs: float
    asymmetry: float
    depth: float
    note: str = ""


@dataclass(frozen=True)
class Refusal(Result):
    """A predicted extremum of a night that could not be timed, and why."""

    night: str
    band: str
    predicted_bjd_tdb: float
    type: str
    cycle: float
    reason: str


def find_timings(
    t: Any,
    mag: Any,
    mag_err: Any,
    night: str,
    band: str,
    ephemeris: Ephemeris,
    kind: str | None = None,
    *,
    rng: np.random.Generator,
    secondary: bool = True,
    window_fraction: float = 0.1,
    min_branch_points: int = 5,
    min_rise_sigma: float = 3.0,
    n_boot: int = 200,
    disagree_sigma: float = DISAGREE_SIGMA,
    template: Any = None,
) -> tuple[list[Timing], list[Refusal]]:
    """Time every predicted extremum of ``kind`` inside one night's data.

    For each predicted extremum (primary and, with ``secondary``, secondary
    minima for an ephemeris of minima) between the first and last point:
    :func:`check_coverage` decides; if covered, two estimators chosen by name
    from :data:`~varstar.timings.estimators.ESTIMATORS` time it on the same
    points (the stretch symmetric about the data's extremum):
    :data:`SYMMETRIC_PAIR`, Kwee & van Woerden giving the time and the
    symmetric polynomial the independent second estimate, or, for a maximum
    with a ``template``, :data:`TEMPLATE_PAIR`.  Kwee & van Woerden runs in
    every case (its asymmetry diagnostic and its time as the others' start);
    when it fails, the extremum is refused with its reason.  The type comes
    from the ephemeris phase (integer cycle: primary, half-integer:
    secondary).

    Parameters
    ----------
    t, mag, mag_err
        One night of one band (BJD_TDB, mag, mag).
    night, band
        Labels carried into the results.
    ephemeris
        Predicts the extrema.
    kind
        ``"minimum"`` or ``"maximum"``; None means the ephemeris' kind.  It
        must match the ephemeris (an ephemeris of maxima does not predict
        minima).
    rng
        Random generator for the bootstrap of the second estimate.
    secondary
        Also time the secondary minima (half-integer cycles) of an ephemeris
        of minima.
    window_fraction, min_branch_points, min_rise_sigma
        See :func:`check_coverage`.
    n_boot
        Bootstrap resamples of the second estimate.
    disagree_sigma
        Threshold of :attr:`Timing.disagree`.
    template
        For maxima: the star's mean light curve as a function of the time from its
        maximum (see :func:`~varstar.timings.mean_curve.template_fit`).  When given, the template fit is the main
        estimate of a maximum and Kwee & van Woerden the second: a pulsator's maximum
        is asymmetric, and a symmetric method would time the centre of symmetry.

    Returns
    -------
    (timings, refusals)
        In time order.
    """
    kind = ephemeris.kind if kind is None else check_kind(kind)
    if kind != ephemeris.kind:
        raise InputError(
            f"times of {kind} need an ephemeris of {kind}; this ephemeris predicts {ephemeris.kind} "
            "(set kind in [ephemeris])"
        )
    if not isinstance(rng, np.random.Generator):
        raise InputError("find_timings: rng must be a numpy.random.Generator")
    t, mag, err = series(t, mag, mag_err, what=f"night {night} band {band}", min_points=1)
    cycles, preds = predict_extrema(ephemeris, float(t[0]), float(t[-1]), secondary=secondary and kind == "minimum")
    timings: list[Timing] = []
    refusals: list[Refusal] = []
    for e, tp in zip(cycles, preds):
        kind_label = "maximum" if kind == "maximum" else ("primary" if float(e).is_integer() else "secondary")
        period_here = float(ephemeris.period_at(e))
        cov = check_coverage(
            t, mag, err, tp, period_here, kind=kind, window_fraction=window_fraction,
            min_branch_points=min_branch_points, min_rise_sigma=min_rise_sigma,
        )
        if not cov.covered:
            refusals.append(Refusal(night, band, float(tp), kind_label, float(e), cov.reason))
            continue
        use = (t >= cov.fit_start) & (t <= cov.fit_end)
        tu, mu, eu = t[use], mag[use], err[use]
        try:
            # Kwee & van Woerden always: its S_min is the asymmetry diagnostic, its time starts the others.
            kvw = estimate(KWEE_VAN_WOERDEN, tu, mu, eu)
        except (ReductionError, InputError) as exc:
            refusals.append(Refusal(night, band, float(tp), kind_label, float(e), str(exc)))
            continue
        pair = TEMPLATE_PAIR if template is not None and kind == "maximum" else SYMMETRIC_PAIR
        options = {
            SYMMETRIC_POLYNOMIAL: {"rng": rng, "n_boot": n_boot, "t0_guess": kvw.time},
            MEAN_CURVE_TEMPLATE: {
                "template": template, "t_guess": kvw.time, "max_shift": window_fraction * period_here,
            },
        }
        main, check_method, t2, e2, disagree, note = _estimates(tu, mu, eu, kvw, pair, options, disagree_sigma)
        if kvw.asymmetry_pvalue < ASYMMETRY_PVALUE:
            note = "; ".join(x for x in (note, _asymmetry_note(kvw, main.method)) if x)
        timings.append(
            Timing(
                bjd_tdb=main.time,
                err=main.err,
                method=main.method,
                band=band,
                night=night,
                type=kind_label,
                cycle=float(e),
                o_minus_c=float(main.time - tp),
                predicted_bjd_tdb=float(tp),
                check_method=check_method,
                check_bjd_tdb=float(t2),
                check_err=float(e2),
                disagree=bool(disagree),
                n_points=int(use.sum()),
                n_pairs=kvw.n_pairs,
                asymmetry=kvw.asymmetry,
                depth=cov.depth,
                note=note,
            )
        )
    return timings, refusals


def _estimates(
    t: np.ndarray,
    mag: np.ndarray,
    err: np.ndarray,
    kvw: KweeVanWoerden,
    pair: tuple[str, str],
    options: dict[str, dict[str, Any]],
    disagree_sigma: float,
) -> tuple[Any, str, float, float, bool, str]:
    """The (main, check) estimates named in ``pair``, on one extremum's points.

    ``kvw`` is the Kwee & van Woerden result already computed; the other
    estimator is called through the table with its ``options``, main first.
    When it fails, Kwee & van Woerden stands alone as the main estimate,
    recorded against the usual check (:data:`SYMMETRIC_PAIR`) with no value and
    a note saying why.

    Returns
    -------
    (main result, check's method, check's time, check's error, disagree, note)
    """
    done = {KWEE_VAN_WOERDEN: kvw}
    try:
        main, check = (done[name] if name in done else estimate(name, t, mag, err, **options[name]) for name in pair)
        disagree = abs(main.time - check.time) > disagree_sigma * math.hypot(main.err, check.err)
    except (ReductionError, InputError) as exc:
        return kvw, SYMMETRIC_PAIR[1], math.nan, math.nan, False, f"no second estimate: {exc}"
    note = ""
    if disagree:
        note = (
            f"the two estimates differ by {abs(main.time - check.time) * 1440.0:.1f} min, more than "
            f"{disagree_sigma:g} combined errors: the extremum may be asymmetric or the data disturbed"
        )
    return main, pair[1], check.time, check.err, disagree, note


def _asymmetry_note(kvw: KweeVanWoerden, main_method: str) -> str:
    """What a timing says when Kwee & van Woerden finds that the branches are not mirror images."""
    if main_method == KWEE_VAN_WOERDEN:
        return (f"the rising and falling branches are not mirror images (their mismatch is {kvw.asymmetry:.1f} times "
                "what the magnitude errors explain): a symmetric method times the centre of symmetry of the data, which can differ "
                "from the extremum by more than the error; check the light curve or the errors")
    return (f"the rising and falling branches are not mirror images (their mismatch is {kvw.asymmetry:.1f} times "
            "what the magnitude errors explain): the mean-curve template allows for that; the symmetric Kwee & van Woerden value "
            "beside it times the centre of symmetry instead")


def disagreements(
    main: np.ndarray,
    main_err: np.ndarray,
    check: np.ndarray,
    check_err: np.ndarray,
    groups: np.ndarray,
    sigma: float = DISAGREE_SIGMA,
    offset_expected: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Which timings' two estimates disagree beyond the usual difference between the two methods.

    Two estimators of one extremum can differ by a constant for a given star: on
    an asymmetric maximum a symmetric method times the centre of symmetry of the
    branches, not the maximum, and it does so on every night alike.  That
    difference says nothing about a night; a night whose difference departs from
    the star's usual one by more than ``sigma`` combined errors does (clouds, a
    gap, a wrong extremum).  The usual difference is the median over each group
    (type and the pair of methods, say) that has at least
    :data:`MIN_FOR_USUAL_OFFSET` finite pairs, else zero.  How far the symmetric
    method's centre lies from the extremum depends on the night's coverage of
    the branches, so the group's own spread (1.4826 times the median absolute
    deviation from the median, a robust standard deviation) joins the two
    errors in the combined error.

    Parameters
    ----------
    main, main_err, check, check_err
        The two estimates of each timing and their 1-sigma errors (days); a
        check that is NaN never disagrees.
    groups
        A label per timing; timings with the same label share a usual difference.
    sigma
        Threshold in combined standard errors.
    offset_expected
        Per timing, whether its two methods may differ by a constant (the
        mean-curve template, which follows an asymmetric extremum, against a
        symmetric method).  In a group too small to give the usual difference
        such a timing is not judged (never disagrees); two symmetric methods
        are compared as they are.

    Returns
    -------
    (disagree, usual)
        A boolean per timing, and the usual difference (main - check, days) it was judged against.
    """
    main, main_err, check, check_err = (np.asarray(a, dtype=float) for a in (main, main_err, check, check_err))
    groups = np.asarray(groups)
    diff = main - check
    ok = np.isfinite(diff) & np.isfinite(main_err) & np.isfinite(check_err)
    usual = np.zeros(diff.size)
    spread = np.zeros(diff.size)
    if offset_expected is not None:
        offset_expected = np.asarray(offset_expected, dtype=bool)
    for g in np.unique(groups):
        rows = (groups == g) & ok
        if rows.sum() < MIN_FOR_USUAL_OFFSET:
            if offset_expected is not None:
                ok &= ~((groups == g) & offset_expected)
        else:
            med = float(np.median(diff[rows]))
            usual[groups == g] = med
            spread[groups == g] = 1.4826 * float(np.median(np.abs(diff[rows] - med)))
    with np.errstate(invalid="ignore"):
        combined = np.sqrt(main_err**2 + check_err**2 + spread**2)
        disagree = ok & (np.abs(diff - usual) > sigma * combined)
    return disagree, usual

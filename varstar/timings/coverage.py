"""Whether a night covers a predicted extremum well enough to time it (pure core).

:func:`check_coverage` applies the rules (data in the window, enough points on
each branch, no gap at the extremum, branches that rise above the noise) and
returns a :class:`Coverage` with the first rule that failed, in words, and the
stretch of data the estimators should use.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..results import Result
from .checks import check_kind, series

__all__ = ["Coverage", "check_coverage"]


@dataclass(frozen=True)
class Coverage(Result):
    """Whether one night covers a predicted extremum well enough to time it.

    Attributes
    ----------
    covered
        True when every rule passes.
    reason
        Why not (empty when covered).
    predicted_bjd_tdb
        The predicted time.
    window_start, window_end
        The window searched, ``predicted -+ half width``.
    t_extreme
        Time of the data's extremum (see :func:`check_coverage`; NaN if none).
    fit_start, fit_end
        The stretch symmetric about ``t_extreme`` that the estimators use
        (as long as the shorter branch).
    n_before, n_after
        Points before and after ``t_extreme`` in that stretch.
    rise_before, rise_after
        How far the smoothed light curve departs from the extremum on each
        branch (mag, positive).
    noise
        Median magnitude error in the window (mag).
    depth
        Larger of the two rises: the depth (or height) seen in the window, a
        lower bound of the full amplitude when the window ends inside the
        eclipse.
    """

    covered: bool
    reason: str
    predicted_bjd_tdb: float
    window_start: float
    window_end: float
    t_extreme: float = math.nan
    fit_start: float = math.nan
    fit_end: float = math.nan
    n_before: int = 0
    n_after: int = 0
    rise_before: float = math.nan
    rise_after: float = math.nan
    noise: float = math.nan
    depth: float = math.nan


def _branch_names(kind: str) -> tuple[str, str]:
    # Before a minimum of light the star fades (descending branch), after it
    # brightens (ascending branch); the other way round for a maximum.
    return ("descending", "ascending") if kind == "minimum" else ("ascending", "descending")


def check_coverage(
    t: Any,
    mag: Any,
    mag_err: Any,
    predicted_bjd_tdb: float,
    period: float,
    *,
    kind: str = "minimum",
    window_fraction: float = 0.1,
    half_window_d: float | None = None,
    min_branch_points: int = 5,
    min_rise_sigma: float = 3.0,
    max_gap_fraction: float = 0.25,
) -> Coverage:
    """Decide whether a night covers a predicted extremum (rules of our own; common practice in spirit).

    The window is ``predicted -+ window_fraction * period`` (or
    ``-+ half_window_d``).  Inside it the magnitudes are smoothed by a running
    median of 5; the data's extremum is the middle of the smoothed points
    within the median magnitude error (at most a quarter of the range) of the
    most extreme one (faintest for a minimum, brightest for a maximum).  The estimators
    then use the stretch symmetric about it, as long as the shorter branch.
    Rules, in the order checked (the first that fails is the reason):

    1. some data in the window;
    2. at least ``2 * min_branch_points + 1`` points in it;
    3. at least ``min_branch_points`` points on each branch (an extremum at
       the window's edge fails here: the minimum may lie outside the data),
       and as many within the stretch symmetric about the extremum;
    4. no gap wider than ``max_gap_fraction`` of the half window on either
       side of the extremum;
    5. on each branch the smoothed curve departs from the extremum by at least
       ``min_rise_sigma`` times the median magnitude error (otherwise the data
       show no extremum there).

    Parameters
    ----------
    t, mag, mag_err
        One night of one band (BJD_TDB, mag, mag).
    predicted_bjd_tdb
        The predicted time of the extremum.
    period
        Period (days), to size the window.
    kind
        ``"minimum"`` or ``"maximum"`` (of light).
    """
    check_kind(kind)
    if not (math.isfinite(period) and period > 0):
        raise InputError(f"check_coverage: period must be positive, got {period}")
    t, mag, err = series(t, mag, mag_err, what="coverage", min_points=0)
    h = float(half_window_d) if half_window_d is not None else window_fraction * period
    if not (math.isfinite(h) and h > 0):
        raise InputError(f"check_coverage: the half window must be positive, got {h}")
    if min_branch_points < 2:
        raise InputError(f"check_coverage: min_branch_points must be at least 2, got {min_branch_points}")
    p = float(predicted_bjd_tdb)
    base = {"predicted_bjd_tdb": p, "window_start": p - h, "window_end": p + h}
    hours = h * 24.0
    sel = np.abs(t - p) <= h
    n = int(sel.sum())
    m = int(min_branch_points)
    before_name, after_name = _branch_names(kind)
    what = f"the predicted {kind} at BJD_TDB {p:.5f}"
    if n == 0:
        return Coverage(False, f"no data within {hours:.2f} h of {what}", **base)
    if n < 2 * m + 1:
        return Coverage(False, f"too few points: {n} within {hours:.2f} h of {what}, need {2 * m + 1}", **base)
    tw, yw, ew = t[sel], mag[sel], err[sel]
    from scipy.ndimage import median_filter

    smooth = median_filter(yw, size=min(5, n), mode="nearest")
    sign = 1.0 if kind == "minimum" else -1.0
    ext = sign * smooth
    noise = float(np.median(ew))
    # Centre of the extremum: middle of the points whose smoothed magnitude is
    # within the typical error (at most a quarter of the range) of the most
    # extreme one, so that a flat-bottomed (total) eclipse is centred on its
    # bottom, not on a noise dip.
    tol = min(noise, 0.25 * float(ext.max() - ext.min()))
    near = np.flatnonzero(ext >= ext.max() - tol)
    te = 0.5 * float(tw[near[0]] + tw[near[-1]])
    i = int(np.argmin(np.abs(tw - te)))
    half = float(min(te - tw[0], tw[-1] - te))
    inner = np.abs(tw - te) <= half
    n_before = int(np.count_nonzero(inner & (tw < te)))
    n_after = int(np.count_nonzero(inner & (tw > te)))
    info = dict(base, t_extreme=te, fit_start=te - half, fit_end=te + half, n_before=n_before, n_after=n_after,
                noise=noise)
    extreme_word = "faintest" if kind == "minimum" else "brightest"
    raw = ((before_name, i, "before", "first", "before the night's data"),
           (after_name, n - 1 - i, "after", "last", "after the night's data"))
    for name, count, side, which, where in raw:
        if count < m:
            hint = f" (the {extreme_word} point is the {which} in the window: the {kind} may lie {where})" if count == 0 else ""
            return Coverage(False, f"{name} branch missing: {count} points {side} the {kind}, need {m}{hint}", **info)
    for name, count, side in ((before_name, n_before, "before"), (after_name, n_after, "after")):
        if count < m:
            return Coverage(
                False,
                f"{name} branch too short: {count} points {side} the {kind} within {half * 1440.0:.0f} min "
                f"(the reach of the shorter branch), need {m}",
                **info,
            )
    gap = max(tw[i] - tw[i - 1], tw[i + 1] - tw[i])
    if gap > max_gap_fraction * h:
        return Coverage(
            False,
            f"gap of {gap * 1440.0:.0f} min at the {kind} (more than {max_gap_fraction:g} of the "
            f"{hours:.2f} h half window); its time cannot be interpolated",
            **info,
        )
    rise_before = float(np.max(ext[i] - ext[:i][inner[:i]]))
    rise_after = float(np.max(ext[i] - ext[i + 1 :][inner[i + 1 :]]))
    info.update(rise_before=rise_before, rise_after=rise_after, depth=max(rise_before, rise_after))
    need = min_rise_sigma * noise
    for name, rise, side in ((before_name, rise_before, "before"), (after_name, rise_after, "after")):
        if rise < need:
            return Coverage(
                False,
                f"{name} branch too shallow: the light changes by {rise:.3f} mag {side} the {kind}, need "
                f"{need:.3f} mag ({min_rise_sigma:g} x the typical error {noise:.3f} mag)",
                **info,
            )
    return Coverage(True, "", **info)

"""The light curve as :func:`varstar.period.analysis.analyse` takes it: checked, sorted, split by band.

:func:`as_series` checks the caller's arrays (the messages say what is wrong and
where) and sorts them by time; the nights and their calibration errors become
per-point group keys (night and band) and errors for :mod:`.nightly`.
:func:`make_series` adds the bands and the reference band (the one with most
points) and gives a :class:`Series`, whose :meth:`Series.points` picks the points
of one band.  :func:`span_words` says the span of a light curve in words, for
messages.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.period import grid

__all__ = ["Points", "Series", "as_series", "make_series", "span_words"]


@dataclass(frozen=True, eq=False)
class Points:
    """Some points of a light curve: times, magnitudes, errors, and their nights' group keys and
    calibration errors (both None when no nights were given)."""

    t: np.ndarray
    y: np.ndarray
    dy: np.ndarray
    group: np.ndarray | None
    group_err: np.ndarray | None


@dataclass(frozen=True, eq=False)
class Series(Points):
    """The whole light curve, time-sorted, with its bands.

    Attributes
    ----------
    band : numpy.ndarray
        Band label of each point ("" when none were given).
    night : object
        The caller's night labels as given (unsorted; None without), for messages.
    bands : tuple of str
        The distinct bands, sorted.
    reference : str
        The band with most points (the first of them on a tie).
    multi : bool
        More than one band.
    baseline : float
        Time span, days.
    """

    band: np.ndarray
    night: Any
    bands: tuple[str, ...]
    reference: str
    multi: bool
    baseline: float

    def points(self, mask: np.ndarray) -> Points:
        """The points where ``mask`` is true (one band, usually)."""
        group, group_err = (None, None) if self.group is None else (self.group[mask], self.group_err[mask])
        return Points(self.t[mask], self.y[mask], self.dy[mask], group, group_err)


def as_series(t: Any, y: Any, dy: Any, band: Any, night: Any, cal_err: Any):
    """Checked, time-sorted arrays; ``night``/``cal_err`` become per-point group keys and errors.

    Returns ``t, y, dy, band, group, group_err`` (the last two None without
    ``night``); a group key is the night and the band, its error the calibration
    error (0 where not positive or not finite).  Raises InputError for arrays of
    different lengths, fewer than :data:`.grid.MIN_POINTS` points, or a non-finite
    value or non-positive error (naming the first such point).
    """
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    dy = np.broadcast_to(np.asarray(dy, dtype=float), t.shape).copy()
    if y.shape != t.shape:
        raise InputError(f"period analysis: {t.size} times but {y.size} magnitudes")
    band = np.full(t.size, "", dtype=object) if band is None else np.asarray(band, dtype=object).ravel()
    if band.shape != t.shape:
        raise InputError(f"period analysis: {t.size} times but {band.size} band labels")
    if t.size == 0:
        raise InputError("period analysis: the light curve is empty (no good points in the chosen band)")
    if t.size < grid.MIN_POINTS:
        raise InputError(
            f"period analysis: {t.size} points are too few; at least {grid.MIN_POINTS} are needed"
        )
    bad = ~(np.isfinite(t) & np.isfinite(y) & np.isfinite(dy) & (dy > 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"period analysis: point {i} has a non-finite time or magnitude or a non-positive error "
            f"(t={t[i]!r}, mag={y[i]!r}, err={dy[i]!r})"
        )
    group = group_err = None
    if night is not None:
        night = np.asarray(night, dtype=object).ravel()
        if night.shape != t.shape:
            raise InputError(f"period analysis: {t.size} times but {night.size} night labels")
        group = np.array([f"{n}|{b}" for n, b in zip(night, band)], dtype=object)
        group_err = np.zeros(t.size) if cal_err is None else np.broadcast_to(np.asarray(cal_err, dtype=float), t.shape)
        group_err = np.where(np.isfinite(group_err) & (group_err > 0), group_err, 0.0)
    order = np.argsort(t, kind="stable")
    pick = (lambda a: None if a is None else a[order])  # noqa: E731
    return t[order], y[order], dy[order], band[order], pick(group), pick(group_err)


def make_series(t: np.ndarray, y: np.ndarray, dy: np.ndarray, band: np.ndarray, group: np.ndarray | None,
                group_err: np.ndarray | None, night: Any) -> Series:
    """The :class:`Series` of arrays from :func:`as_series`, with its bands and reference band.

    ``night`` is the caller's night labels as given (kept for messages).
    """
    labels, counts = np.unique(band, return_counts=True)
    bands = tuple(str(b) for b in labels)
    return Series(t, y, dy, group, group_err, band=band, night=night, bands=bands,
                  reference=bands[int(np.argmax(counts))], multi=len(bands) > 1, baseline=float(t[-1] - t[0]))


def span_words(baseline: float, night: Any) -> str:
    """The span of a light curve in words: ``"12.34 d (5 nights)"`` (no count without ``night``)."""
    n_nights = np.unique(np.asarray(night, dtype=str)).size if night is not None else None
    return f"{baseline:.2f} d" + (f" ({n_nights} night{'s' if n_nights != 1 else ''})" if n_nights else "")

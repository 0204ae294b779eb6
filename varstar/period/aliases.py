"""Aliases: the spectral window of the sampling, peak lists, and how peaks relate.

Gaps in the sampling repeat in the periodogram: a star observed from one site
every night is seen at nearly the same hour each day, so a signal at ``f`` also
raises peaks at ``f +- 1`` c/d (and ``+- 2`` ...), and seasons raise fine
structure at ``f +- 1`` c/yr.  Which of those peaks is the true one is decided by
the data only when its power clearly exceeds the others'.  This module computes
the window, lists the strongest distinct peaks, names each one's relation to the
best peak and gives a plain-words verdict.

Relations are judged with a tolerance of the frequency resolution ``1/T``
(``T`` the time baseline) by default; a harmonic ``k f`` gets ``k`` times that
tolerance (a peak's position error scales with ``k``).  A "+1 c/d" alias is
accepted at either 1 solar or 1 sidereal day^-1 (1.0027379 c/d): single-site
sampling raises its window peak between the two.  "+-1 c/yr" aliases are named
only where they are resolved (``1/365.25 c/d`` larger than the tolerance).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.results import Result, json_float
from varstar.period._common import check_freq

__all__ = ["spectral_window", "find_peaks", "relate", "AliasPeak", "AliasReport", "alias_report"]

DAYS_PER_YEAR = 365.25
SIDEREAL_CPD = 1.0027379093  # sidereal days per solar day
_CHUNK_ELEMENTS = 2_000_000


def spectral_window(t: Any, freq: Any) -> np.ndarray:
    """Spectral window ``W(f) = |sum_j exp(2 pi i f t_j)|**2 / N**2`` of the sampling.

    ``W(0) = 1``; ``W`` near 1 at another frequency means the sampling cannot tell
    a signal at ``f0`` from one at ``f0 +- f``.

    Parameters
    ----------
    t : array_like
        Observation times (days).
    freq : array_like
        Frequencies (cycles/day).

    Returns
    -------
    np.ndarray
        The window at each frequency (chunks of about two million terms at once).
    """
    t = np.asarray(t, dtype=float)
    if t.ndim != 1 or t.size == 0 or not np.all(np.isfinite(t)):
        raise InputError("spectral window: give a non-empty 1-D array of finite times")
    freq = check_freq(freq)
    tt = t - t.mean()  # |sum| does not depend on the time origin; this keeps phases precise
    n = t.size
    out = np.empty(freq.size)
    chunk = max(1, _CHUNK_ELEMENTS // n)
    for start in range(0, freq.size, chunk):
        arg = 2.0 * math.pi * np.multiply.outer(freq[start : start + chunk], tt)
        out[start : start + chunk] = np.cos(arg).sum(axis=1) ** 2 + np.sin(arg).sum(axis=1) ** 2
    return out / n**2


def find_peaks(
    freq: Any,
    power: Any,
    *,
    n: int = 10,
    min_separation: float | None = None,
) -> np.ndarray:
    """Indices of the ``n`` strongest distinct local maxima of ``power``, strongest first.

    A local maximum is a point higher than its left neighbour and not lower than its
    right one (the first edge of a plateau); the two ends of the grid are not
    counted (the peak may lie outside it).  With ``min_separation`` (cycles/day) a
    peak closer than that to a stronger chosen peak is skipped.

    Parameters
    ----------
    freq, power : array_like
        The periodogram (larger power = better; for PDM pass ``1 - theta``).
    n : int
        How many peaks at most.
    min_separation : float, optional
        Minimum distance between returned peaks (cycles/day).
    """
    freq = check_freq(freq)
    power = np.asarray(power, dtype=float)
    if power.shape != freq.shape:
        raise InputError(f"find_peaks: {freq.size} frequencies but {power.size} powers")
    if n < 1:
        raise InputError(f"find_peaks: n must be at least 1 (got {n})")
    p = np.where(np.isfinite(power), power, -np.inf)
    if p.size < 3:
        return np.zeros(0, dtype=np.intp)
    inner = np.flatnonzero((p[1:-1] > p[:-2]) & (p[1:-1] >= p[2:])) + 1
    order = inner[np.argsort(-p[inner], kind="stable")]
    if not min_separation:
        return order[:n].astype(np.intp)
    chosen: list[int] = []
    for i in order:  # loop over peaks (few), not over measurements
        if all(abs(freq[i] - freq[j]) >= min_separation for j in chosen):
            chosen.append(int(i))
            if len(chosen) == n:
                break
    return np.asarray(chosen, dtype=np.intp)


def _candidates(f_best: float) -> list[tuple[str, float, float]]:
    """(relation, predicted frequency, tolerance multiplier)."""
    yr = 1.0 / DAYS_PER_YEAR
    cands: list[tuple[str, float, float]] = [("same peak", f_best, 1.0)]
    for day in (1.0, SIDEREAL_CPD):
        cands += [
            ("+1 c/d alias", f_best + day, 1.0),
            ("-1 c/d alias", f_best - day, 1.0),
            ("+2 c/d alias", f_best + 2 * day, 1.0),
            ("-2 c/d alias", f_best - 2 * day, 1.0),
            ("1 c/d mirror alias", day - f_best, 1.0),
        ]
    cands += [("+1 c/yr alias", f_best + yr, 1.0), ("-1 c/yr alias", f_best - yr, 1.0)]
    cands += [("half period", 2 * f_best, 2.0), ("double period", 0.5 * f_best, 1.0)]
    cands += [(f"harmonic {k}", k * f_best, float(k)) for k in range(3, 11)]
    cands += [(f"subharmonic {k}", f_best / k, 1.0) for k in range(3, 6)]
    return cands


def relate(
    f_best: float,
    f_other: float,
    *,
    baseline_d: float,
    tolerance: float | None = None,
) -> str:
    """Name the relation of the peak at ``f_other`` to the best peak at ``f_best``.

    Returns one of ``"same peak"``, ``"+1 c/d alias"``, ``"-1 c/d alias"``,
    ``"+2 c/d alias"``, ``"-2 c/d alias"``, ``"1 c/d mirror alias"`` (at ``1 - f``,
    the alias of the negative frequency), ``"+1 c/yr alias"``, ``"-1 c/yr alias"``,
    ``"half period"`` (``2 f``), ``"double period"`` (``f / 2``), ``"harmonic k"``
    (``k f``, k = 3..10), ``"subharmonic k"`` (``f / k``, k = 3..5) or
    ``"unrelated"``.  When several fit, the one closest in units of its tolerance wins.

    Parameters
    ----------
    f_best, f_other : float
        Frequencies (cycles/day).
    baseline_d : float
        Time span ``T`` of the data; sets the default tolerance ``1/T``.
    tolerance : float, optional
        Frequency tolerance (cycles/day) instead of ``1/T``.
    """
    if not (baseline_d and baseline_d > 0):
        raise InputError(f"relate: baseline_d must be positive (got {baseline_d!r})")
    tol = 1.0 / baseline_d if tolerance is None else float(tolerance)
    if not tol > 0:
        raise InputError(f"relate: tolerance must be positive (got {tolerance!r})")
    best_label, best_score = "unrelated", math.inf
    yr_resolved = 1.0 / DAYS_PER_YEAR > tol
    for label, pred, mult in _candidates(float(f_best)):
        if "c/yr" in label and not yr_resolved:
            continue
        if pred <= 0 and label != "same peak":
            continue
        score = abs(float(f_other) - pred) / (tol * mult)
        if score <= 1.0 and score < best_score:
            best_label, best_score = label, score
    return best_label


@dataclass(frozen=True)
class AliasPeak(Result):
    """One periodogram peak and its relation to the best one."""

    period: float
    frequency: float
    power: float
    power_ratio: float
    relation: str


@dataclass(frozen=True)
class AliasReport(Result):
    """The strongest peaks, their relations to the best peak, and a verdict.

    Attributes
    ----------
    secure : bool
        False when another peak reaches ``secure_ratio`` of the best peak's power.
    note : str
        The verdict in plain words, with what would settle the choice.
    secure_ratio, baseline_d : float
        The settings used.
    peaks : tuple of AliasPeak
        Strongest first; ``peaks[0]`` is the best (relation ``"best"``).
    """

    secure: bool
    note: str
    secure_ratio: float
    baseline_d: float
    peaks: tuple[AliasPeak, ...]

    @property
    def best_period(self) -> float:
        """Period of the best peak (days)."""
        return self.peaks[0].period

    @property
    def best_frequency(self) -> float:
        """Frequency of the best peak (cycles/day)."""
        return self.peaks[0].frequency

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict: the best peak's period and frequency, then the fields."""
        return {
            "best_period": json_float(self.best_period),
            "best_frequency": json_float(self.best_frequency),
            **super().to_dict(),
        }


def _advice(relation: str) -> str:
    if "c/d" in relation:
        return "more nights spread in longitude/time would decide (another site, or longer nights)"
    if "c/yr" in relation:
        return "observations spread over more of the season, or another season, would decide"
    if relation in ("half period", "double period") or relation.startswith(("harmonic", "subharmonic")):
        return (
            "fold the data at both periods and see which curve they support "
            "(phase-dispersion check of P against 2P)"
        )
    return "the star may be multiperiodic or the noise large: prewhiten the best frequency and look again"


def alias_report(
    freq: Any,
    power: Any,
    *,
    baseline_d: float,
    n: int = 6,
    secure_ratio: float = 0.8,
    tolerance: float | None = None,
) -> AliasReport:
    """List the strongest peaks of a periodogram with their relations and a verdict.

    Peaks closer than ``1.5 / T`` to a stronger one are treated as parts of it
    (the Rayleigh resolution with a margin).  The best peak is *secure* when no
    other listed peak reaches ``secure_ratio`` times its power.  The default 0.8 is
    this module's choice (not a published threshold): a peak with 80% of the best
    one's power is a live competitor for data with noise of that order.

    Parameters
    ----------
    freq, power : array_like
        A periodogram (larger = better; for PDM pass ``1 - theta``).
    baseline_d : float
        Time span of the data.
    n : int
        Peaks to list.
    secure_ratio : float
        Power ratio above which a second peak makes the choice insecure.
    tolerance : float, optional
        Passed to :func:`relate`.
    """
    if not (baseline_d and baseline_d > 0):
        raise InputError(f"alias report: baseline_d must be positive (got {baseline_d!r})")
    if not 0 < secure_ratio <= 1:
        raise InputError(f"alias report: secure_ratio must be in (0, 1] (got {secure_ratio})")
    freq = check_freq(freq)
    power = np.asarray(power, dtype=float)
    idx = find_peaks(freq, power, n=n, min_separation=1.5 / baseline_d)
    if idx.size == 0:
        raise InputError("alias report: the periodogram has no local maximum inside the frequency grid")
    f0, p0 = float(freq[idx[0]]), float(power[idx[0]])
    peaks = []
    for j, i in enumerate(idx):
        fi, pi = float(freq[i]), float(power[i])
        rel = "best" if j == 0 else relate(f0, fi, baseline_d=baseline_d, tolerance=tolerance)
        ratio = pi / p0 if p0 > 0 else float("nan")
        peaks.append(AliasPeak(1.0 / fi if fi > 0 else float("inf"), fi, pi, ratio, rel))
    rivals = [p for p in peaks[1:] if p.power_ratio >= secure_ratio and p.relation != "same peak"]
    if rivals:
        r = rivals[0]
        note = (
            f"the {r.relation} at P={r.period:.6g} d has {100 * r.power_ratio:.0f}% of the best peak's "
            f"power (P={peaks[0].period:.6g} d): the choice is not secure; {_advice(r.relation)}"
        )
        secure = False
    elif len(peaks) > 1:
        r = peaks[1]
        note = (
            f"the best peak at P={peaks[0].period:.6g} d is secure: the next strongest peak "
            f"({r.relation}, P={r.period:.6g} d) has {100 * r.power_ratio:.0f}% of its power"
        )
        secure = True
    else:
        note = f"the best peak at P={peaks[0].period:.6g} d is the only peak in the grid"
        secure = True
    return AliasReport(
        secure=secure, note=note, secure_ratio=float(secure_ratio), baseline_d=float(baseline_d),
        peaks=tuple(peaks),
    )

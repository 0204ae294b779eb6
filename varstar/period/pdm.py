"""Phase Dispersion Minimisation (Stellingwerf 1978, ApJ 224, 953).

For a trial frequency the light curve is folded, the phase interval is cut into
``n_bins`` bins, and ``n_covers`` sets of such bins are used, each shifted by
``1/(n_bins * n_covers)`` in phase (Stellingwerf's "covers").  The statistic is

.. math::

    \\theta = \\frac{s^2}{\\sigma^2}, \\qquad
    s^2 = \\frac{\\sum_j \\mathrm{SS}_j}{\\sum_j (n_j - 1)}, \\qquad
    \\sigma^2 = \\frac{\\mathrm{SS}_{tot}}{N - 1},

where the sums run over every non-empty bin of every cover, ``n_j`` is the number
of points in bin ``j`` and ``SS`` are sums of squared deviations from the bin mean
(from the overall mean for ``SS_tot``).

Weighting: each point has weight ``w = 1/dy**2``; bin means are weighted means and
``SS_j = sum w (y - ybar_j)**2``.  With equal errors this is exactly Stellingwerf's
``theta = [sum (n_j - 1) s_j**2 / (sum n_j - M)] / sigma**2``.  With weights, for
pure Gaussian noise with the stated errors both ``SS`` sums are chi-square
variables with ``sum (n_j - 1)`` and ``N - 1`` degrees of freedom, so ``theta``
is close to 1, and (one cover) ``theta (N - M) / (N - 1)`` follows a
Beta((N - M)/2, (M - 1)/2) law, as in the unweighted case.  A bin with a single
point contributes neither to ``SS`` nor to the degrees of freedom; empty bins are
ignored.

How it is computed
------------------
Two sums per bin suffice.  With ``yc`` the magnitudes less their weighted mean,
``SS_j = sum_j w yc**2 - (sum_j w yc)**2 / sum_j w``; the first term summed over
the bins of all covers is ``n_covers * SS_tot`` at every frequency, and the
degrees of freedom are ``n_covers * N`` less the number of non-empty bins (a bin
is non-empty when its summed weight is positive).  So a trial frequency costs one
pass over the points that bins ``w`` and ``w yc`` into ``n_bins * n_covers`` fine
bins; the bins of all covers are sums of ``n_covers`` consecutive fine bins.

The passes are vectorised over chunks of frequencies with ``numpy.bincount`` on
flattened (frequency, bin) indices.  Within a chunk of nearby frequencies
``f = f_a + d`` the phase is ``frac(f_a t) + d t``: the first term is computed
once per chunk and the second stays below a few cycles, so the fine-bin index
needs no modulo per point (each of those few cycles gets bins of its own, folded
together afterwards).  This is plain numpy, 5-9 ns per point and frequency on
one core of the benchmark machine, two to four times less than binning the four
sums of the textbook form with a modulo per point (``benchmarks/bench_period.py
--kernels``).  A compiled loop might gain another three times,
but it would make the package need a compiler or a binary dependency; instead
:func:`pdm_search` keeps the number of frequencies small on long series.

Long series
-----------
PDM at every frequency of a fine grid costs ``N x M`` point-frequency steps:
1.8e10 for 50,000 points over ten years, a minute and a half.
:func:`pdm_search` evaluates the whole grid only within a work budget; above it,
narrow windows around given candidate frequencies (a periodogram's peaks, their
halves and doubles) and a coarse pass of bounded work: PDM of the densest short
stretch of the series on its own, coarser grid (minima there are as wide as one
over the stretch's length, so that grid samples them properly), whose best minima
are followed through longer and longer stretches to the whole series.  The cost
grows linearly with ``N``.

P or 2P
-------
:class:`PeriodChoice` records whether a folded curve repeats at P or only after
2P; :func:`varstar.period.p_or_2p.choose_p_or_2p` makes that choice (by phase
neighbours, with this module's theta at both periods for the record).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from collections.abc import Sequence
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.results import Result
from varstar.period._common import check_freq, check_series

__all__ = [
    "DEFAULT_BUDGET",
    "PeriodChoice",
    "check_bins",
    "pdm_search",
    "pdm_theta",
]

#: Point-frequency steps binned at once (frequencies x points per chunk); about
#: the fastest size on the benchmark machine (larger chunks leave the caches).
_CHUNK_ELEMENTS = 1 << 20

#: Largest spread of phase (cycles over the baseline) of the frequencies of one
#: chunk for the modulo-free binning; wider chunks take the modulo path.
_MAX_SPAN_CYCLES = 16.0

#: Default work budget of :func:`pdm_search` in points x frequencies (about half a
#: second on one core of the benchmark machine).
DEFAULT_BUDGET = 100_000_000

#: Each level of the coarse pass's follow-up uses a stretch this many times longer.
_STRETCH_GROWTH = 4.0


def check_bins(n_bins: int, n_covers: int) -> tuple[int, int]:
    """``n_bins`` and ``n_covers`` as integers, refused (InputError) below 2 and 1."""
    n_bins, n_covers = int(n_bins), int(n_covers)
    if n_bins < 2:
        raise InputError(f"phase dispersion: n_bins must be at least 2 (got {n_bins})")
    if n_covers < 1:
        raise InputError(f"phase dispersion: n_covers must be at least 1 (got {n_covers})")
    return n_bins, n_covers


@dataclass(frozen=True)
class _Series:
    """A light curve prepared for binning: times from the first, weights, centred weighted values."""

    tt: np.ndarray
    w: np.ndarray
    wy: np.ndarray
    ss_tot: float
    sigma2: float
    span: float

    @property
    def n(self) -> int:
        return self.tt.size


def _prepare(t: np.ndarray, y: np.ndarray, dy: np.ndarray) -> _Series:
    w = 1.0 / dy**2
    yc = y - np.sum(w * y) / np.sum(w)
    ss_tot = float(np.sum(w * yc**2))
    n = t.size
    tt = t - t.min()
    return _Series(tt, w, w * yc, ss_tot, ss_tot / (n - 1) if n > 1 else float("nan"), float(tt.max()))


def _bin_chunk(s: _Series, fc: np.ndarray, n_fine: int, bufs: dict) -> tuple[np.ndarray, np.ndarray]:
    """Summed weights and weighted values per (frequency, fine bin) for sorted frequencies ``fc``."""
    k, n = fc.size, s.n
    x = bufs["x"][: k * n].reshape(k, n)
    idx = bufs["idx"][: k * n].reshape(k, n)
    span = float(fc[-1] - fc[0]) * s.span
    if span <= _MAX_SPAN_CYCLES:
        # frac(f_a t) once, then d t (< span cycles): no modulo per point
        cycles = int(span) + 2  # x < (span + 1) n_fine < cycles n_fine
        base = fc[0] * s.tt
        base -= np.floor(base)
        base *= n_fine
        np.multiply((fc - fc[0])[:, None], bufs["ttn"][None, :], out=x)
        x += base
        width = cycles * n_fine
    else:
        cycles, width = 1, n_fine
        np.multiply(fc[:, None], s.tt[None, :], out=x)
        x -= np.floor(x)
        x *= n_fine
    np.copyto(idx, x, casting="unsafe")  # truncation = floor (x >= 0)
    if cycles == 1:
        np.minimum(idx, n_fine - 1, out=idx)
    idx += (np.arange(k, dtype=np.intp) * width)[:, None]
    flat = idx.reshape(-1)
    size = k * width
    sw = np.bincount(flat, weights=bufs["w"][: k * n], minlength=size)
    swy = np.bincount(flat, weights=bufs["wy"][: k * n], minlength=size)
    if cycles > 1:
        sw = sw.reshape(k, cycles, n_fine).sum(axis=1)
        swy = swy.reshape(k, cycles, n_fine).sum(axis=1)
    return sw.reshape(k, n_fine), swy.reshape(k, n_fine)


def _theta_of(s: _Series, freq: np.ndarray, n_bins: int, n_covers: int) -> np.ndarray:
    """Theta at each of ``freq`` (any order) for a prepared series."""
    n_fine = n_bins * n_covers
    order = None
    if freq.size > 1 and np.any(np.diff(freq) < 0):
        order = np.argsort(freq, kind="stable")
        freq = freq[order]
    n = s.n
    rows_max = max(1, min(freq.size, _CHUNK_ELEMENTS // max(n, 1)))
    bufs = {
        "x": np.empty(rows_max * n),
        "idx": np.empty(rows_max * n, dtype=np.intp),
        "w": np.tile(s.w, rows_max),  # bincount needs a weight per (frequency, point)
        "wy": np.tile(s.wy, rows_max),
        "ttn": s.tt * n_fine,
    }
    theta = np.empty(freq.size)
    limit = _MAX_SPAN_CYCLES / s.span if s.span > 0 else np.inf
    i = 0
    while i < freq.size:
        j = min(freq.size, i + rows_max)
        if (freq[j - 1] - freq[i]) > limit:
            # keep the chunk modulo-free if that leaves it at least a quarter of its rows
            j_span = int(np.searchsorted(freq, freq[i] + limit, side="right"))
            if 4 * (j_span - i) >= j - i:
                j = max(j_span, i + 1)
        sw, swy = _bin_chunk(s, freq[i:j], n_fine, bufs)
        if n_covers > 1:
            # the bins of all covers: windows of n_covers consecutive fine bins (cyclic)
            acc_w, acc_wy = sw.copy(), swy.copy()
            for c in range(1, n_covers):
                acc_w += np.roll(sw, -c, axis=1)
                acc_wy += np.roll(swy, -c, axis=1)
            sw, swy = acc_w, acc_wy
        nonempty = sw > 0.0
        with np.errstate(invalid="ignore", divide="ignore"):
            between = np.where(nonempty, swy**2 / np.where(nonempty, sw, 1.0), 0.0).sum(axis=1)
            ss = np.maximum(n_covers * s.ss_tot - between, 0.0)
            dof = n_covers * n - nonempty.sum(axis=1)
            theta[i:j] = np.where(dof > 0, (ss / dof) / s.sigma2, np.nan)
        i = j
    if order is not None:
        out = np.empty_like(theta)
        out[order] = theta
        return out
    return theta


def pdm_theta(
    t: Any,
    y: Any,
    dy: Any,
    freq: Any,
    *,
    n_bins: int = 10,
    n_covers: int = 2,
) -> np.ndarray:
    """Stellingwerf's PDM statistic theta at each trial frequency.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days), magnitudes and 1-sigma errors (``dy=None``: equal weights).
    freq : array_like
        Trial frequencies (cycles/day).
    n_bins : int
        Bins per cover (Stellingwerf's ``N_b``).
    n_covers : int
        Number of bin sets, each shifted by ``1/(n_bins * n_covers)`` in phase.

    Returns
    -------
    np.ndarray
        ``theta`` per frequency: about 1 where the folded curve shows no structure,
        small where points of equal phase agree.  NaN where no bin holds two points.

    Notes
    -----
    Weighting with ``1/dy**2`` as described in the module docstring.  Cost is
    ``O(len(freq) * N)``, 5-9 ns per point and frequency; for long series over
    fine grids see :func:`pdm_search`.
    """
    t, y, dy = check_series(t, y, dy, what="phase dispersion")
    freq = check_freq(freq)
    n_bins, n_covers = check_bins(n_bins, n_covers)
    s = _prepare(t, y, dy)
    if s.ss_tot <= 0.0:
        raise InputError("phase dispersion: the magnitudes are all equal; there is nothing to fold")
    return _theta_of(s, freq, n_bins, n_covers)


# --------------------------------------------------------------------------- search on long series


def _window(freq: np.ndarray, g: float, half: float, at_least: int = 3) -> tuple[int, int] | None:
    """Grid indices ``[lo, hi)`` within ``half`` of ``g`` (at least ``at_least`` steps each side)."""
    if not (np.isfinite(g) and freq[0] - half <= g <= freq[-1] + half):
        return None
    lo = int(np.searchsorted(freq, g - half, side="left"))
    hi = int(np.searchsorted(freq, g + half, side="right"))
    j = int(np.clip(np.searchsorted(freq, g), 0, freq.size - 1))
    lo = max(0, min(lo, j - at_least))
    hi = min(freq.size, max(hi, j + at_least + 1))
    return lo, hi


def _densest_stretch(t: np.ndarray, length: float) -> tuple[int, int]:
    """Indices ``[a, b)`` of the sorted times ``t`` in the stretch of ``length`` days holding most points.

    Stretches start at (a sample of at most 2000 of) the points, which is plenty
    for choosing where to look.
    """
    step = max(1, t.size // 2000)
    starts = np.arange(0, t.size, step)
    ends = np.searchsorted(t, t[starts] + length, side="right")
    k = int(np.argmax(ends - starts))
    return int(starts[k]), int(ends[k])


def _nested_stretch(t: np.ndarray, a: int, b: int, length: float) -> tuple[int, int]:
    """Indices of the stretch of ``length`` days centred on ``t[a:b]``'s middle, kept within the data."""
    mid = 0.5 * (t[a] + t[b - 1])
    lo = min(max(mid - 0.5 * length, t[0]), t[-1] - length)
    return int(np.searchsorted(t, lo, side="left")), int(np.searchsorted(t, lo + length, side="right"))


def _local_minima(theta: np.ndarray) -> np.ndarray:
    """Indices of the local minima of ``theta`` (NaN never one), lowest first."""
    th = np.where(np.isfinite(theta), theta, np.inf)
    if th.size < 3:
        i = np.flatnonzero(np.isfinite(th))
        return i[np.argsort(th[i], kind="stable")]
    left = np.concatenate(([np.inf], th[:-1]))
    right = np.concatenate((th[1:], [np.inf]))
    i = np.flatnonzero((th < left) & (th <= right) & np.isfinite(th))
    return i[np.argsort(th[i], kind="stable")]


def _coarse_pass(t, y, dy, freq, targets, budget, n_best, n_bins, n_covers):
    """Windows ``[lo, hi)`` of the grid worth evaluating beyond the targets', and a note in words.

    ``t`` sorted.  Level 1: PDM of the densest stretch of length ``T1`` (chosen so
    that points x frequencies stay within ``budget``) on a grid of the same
    oversampling relative to ``1/T1``, over the frequencies with at least two
    cycles in the stretch.  Its ``n_best`` lowest minima that are not within half
    a peak width (``0.5/T1``) of a target are followed: at each next level the
    stretch is ``_STRETCH_GROWTH`` times longer (around the first one) and PDM is
    evaluated within +-1/T_prev of each candidate on that stretch's own grid; the
    lowest point of each window is the new candidate.  At the whole series the
    windows +-1/T_prev are returned as grid windows.
    """
    span = float(t[-1] - t[0])
    m = freq.size
    df = float(freq[-1] - freq[0]) / (m - 1)
    n0 = 1.0 / (span * df)  # grid points per peak width 1/T
    f_hi = float(freq[-1])

    def f_lo(length: float) -> float:
        return max(float(freq[0]), 2.0 / length)

    def cost(length: float) -> float:
        a, b = _densest_stretch(t, length)
        n_f = (f_hi - f_lo(length)) * n0 * length + 1
        return (b - a) * max(n_f, 0.0)

    lo_len, hi_len = 0.0, span
    for _ in range(30):  # bisection on the stretch length: cost grows with it
        mid = 0.5 * (lo_len + hi_len)
        lo_len, hi_len = (mid, hi_len) if cost(mid) <= budget else (lo_len, mid)
    length = lo_len
    a, b = _densest_stretch(t, length) if length > 0 else (0, 0)
    if length <= 0 or b - a < 5 * n_bins or f_lo(length) >= f_hi or length * f_hi < 2:
        return [], "no coarse pass (the work budget allows too short a stretch)"

    def level_theta(a, b, f):
        s = _prepare(t[a:b], y[a:b], dy[a:b])
        if not s.ss_tot > 0:
            return np.full(f.size, np.nan)
        return _theta_of(s, f, n_bins, n_covers)

    f1 = f_lo(length) + np.arange(int((f_hi - f_lo(length)) * n0 * length) + 1) / (n0 * length)
    th1 = level_theta(a, b, f1)
    best = _local_minima(th1)[:n_best]
    targets = np.sort(np.asarray(targets, dtype=float))

    def covered(g: float, tol: float) -> bool:
        if targets.size == 0:
            return False
        j = int(np.searchsorted(targets, g))
        return any(abs(targets[k] - g) <= tol for k in (j - 1, j) if 0 <= k < targets.size)

    cands = [float(f1[i]) for i in best if not covered(float(f1[i]), 0.5 / length)]
    note = (f"a coarse pass over the densest {length:.0f}-day stretch ({b - a:,} points, {f1.size:,} trial frequencies, "
            f"periods {1 / f_hi:.3g} to {1 / f_lo(length):.3g} d)")
    if not cands:
        return [], note + f": its {best.size} lowest minima all lie at the candidates"
    n_followed = len(cands)
    lengths, windows = [], []
    prev = length
    while cands:
        cur = min(span, _STRETCH_GROWTH * prev)
        half = 1.0 / prev
        if cur >= span:
            for g in cands:
                w = _window(freq, g, half)
                if w is not None:
                    windows.append(w)
            break
        lengths.append(cur)
        a, b = _nested_stretch(t, a, b, cur)
        k = int(math.ceil(half * n0 * cur))
        offsets = np.arange(-k, k + 1) / (n0 * cur)
        grids = [g + offsets for g in cands]
        th = level_theta(a, b, np.concatenate(grids)).reshape(len(cands), offsets.size)
        found = []
        for g_row, th_row in zip(grids, th):
            if np.isfinite(th_row).any():
                i = int(np.nanargmin(th_row))
                found.append((float(th_row[i]), float(g_row[i])))
        found.sort()
        cands = []
        for _, g in found:  # lowest first; drop repeats and those at the candidates
            if not covered(g, 0.5 / cur) and all(abs(g - c) > 0.5 / cur for c in cands):
                cands.append(g)
        prev = cur
    via = ""
    if len(lengths) == 1:
        via = f" through a {lengths[0]:.0f}-day stretch"
    elif lengths:
        via = " through " + ", ".join(f"{x:.0f}" for x in lengths[:-1]) + f" and {lengths[-1]:.0f}-day stretches"
    if not windows:
        return windows, note + f"; {n_followed} of its lowest minima, followed{via}, turned out to lie at the candidates"
    n_new = sum(hi - lo for lo, hi in windows)
    return windows, note + (f"; {n_followed} of its lowest minima followed{via} to the whole series: "
                            f"{len(windows)} more window{'s' if len(windows) > 1 else ''} ({n_new:,} grid frequencies)")


def _target_windows(freq: np.ndarray, centres: Any, multiples: Sequence[float], half_width: float,
                    span: float) -> tuple[list[float], np.ndarray, list[str]]:
    """The windows of :func:`pdm_search` around the candidates: targets, grid mask and a note.

    Returns the sorted window middles (each centre times each of ``multiples``),
    the mask of the grid frequencies within ``half_width / span`` of one (at least
    three steps each side, :func:`_window`), and the words for the description
    (empty when no window falls on the grid).
    """
    half = float(half_width) * (1.0 / span)
    targets = sorted({float(c) * float(k) for c in np.atleast_1d(np.asarray(centres, dtype=float))
                      for k in multiples if np.isfinite(c) and c * k > 0})
    mask = np.zeros(freq.size, dtype=bool)
    n_windows = 0
    for g in targets:
        w = _window(freq, g, half)
        if w is not None:
            mask[w[0]:w[1]] = True
            n_windows += 1
    n_target_freqs = int(mask.sum())
    parts = []
    if n_windows:
        parts.append(f"windows of +-{half_width:g}/T around {n_windows} candidate frequencies "
                     f"({len(np.atleast_1d(centres))} given, times {', '.join(f'{k:g}' for k in multiples)}): "
                     f"{n_target_freqs:,} grid frequencies")
    return targets, mask, parts


def pdm_search(
    t: Any,
    y: Any,
    dy: Any,
    freq: Any,
    centres: Sequence[float] = (),
    *,
    n_bins: int = 10,
    n_covers: int = 2,
    budget: float = DEFAULT_BUDGET,
    multiples: Sequence[float] = (1.0, 0.5, 2.0),
    half_width: float = 1.0,
    n_coarse: int = 3,
    coarse_share: float = 0.25,
) -> tuple[np.ndarray, str]:
    """PDM theta on a frequency grid, within a work budget: the whole grid or where it matters.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days), magnitudes and 1-sigma errors (``dy=None``: equal weights).
    freq : array_like
        The trial grid (cycles/day), increasing; uniform, such as
        :func:`varstar.period.grid.frequency_grid` makes.
    centres : sequence of float
        Candidate frequencies (e.g. a periodogram's strongest peaks).
    n_bins, n_covers : int
        As in :func:`pdm_theta`.
    budget : float
        Points x frequencies.  When the whole grid costs no more, it is evaluated
        (the answer is then :func:`pdm_theta` on ``freq``; in windows, the same
        values to rounding).
    multiples : sequence of float
        Each centre times each of these is a window's middle (default: the centre,
        its half and its double: PDM's minimum of a binary with two minima per cycle
        lies at half a sinusoid periodogram's frequency).
    half_width : float
        Half width of the windows in peak widths ``1/T`` (``T`` the baseline); at
        least three grid steps.  One peak width covers a periodogram peak's whole
        main lobe.
    n_coarse : int
        Lowest minima of the coarse pass to follow (0: no coarse pass).
    coarse_share : float
        Share of ``budget`` given to the coarse pass's first level.

    Returns
    -------
    theta : numpy.ndarray
        Theta on ``freq``, NaN where not evaluated.
    description : str
        Where it was evaluated, in plain words.

    Notes
    -----
    Cost above the budget: ``N`` times the frequencies of the windows (a fixed
    number per centre), plus ``coarse_share * budget`` for the coarse pass's first
    level, plus for each minimum it follows about ``2 * _STRETCH_GROWTH`` peak
    widths of the grid on ever longer stretches (at most ``N`` times some hundred
    frequencies).  All linear in ``N``; the old rule (a strided coarse pass and
    windows as wide as its stride) grew as ``N**2``.

    The coarse pass sees only the frequencies with at least two cycles in its
    stretch, and a minimum that is shallow in that stretch can be missed; the
    windows around the centres are the main search.
    """
    t, y, dy = check_series(t, y, dy, what="phase dispersion")
    freq = check_freq(freq)
    n_bins, n_covers = check_bins(n_bins, n_covers)
    if freq.size > 1 and not np.all(np.diff(freq) > 0):
        raise InputError("phase dispersion search: the frequency grid must increase (build it with frequency_grid)")
    s = _prepare(t, y, dy)
    if s.ss_tot <= 0.0:
        raise InputError("phase dispersion: the magnitudes are all equal; there is nothing to fold")
    n, m = t.size, freq.size
    if n * m <= budget or m < 3 or s.span <= 0:
        return _theta_of(s, freq, n_bins, n_covers), f"whole grid ({m:,} frequencies, {n:,} points)"

    targets, mask, parts = _target_windows(freq, centres, multiples, half_width, s.span)
    if n_coarse > 0:
        by_time = np.argsort(t, kind="stable")
        windows, note = _coarse_pass(t[by_time], y[by_time], dy[by_time], freq, targets, coarse_share * budget,
                                     int(n_coarse), n_bins, n_covers)
        for lo, hi in windows:
            mask[lo:hi] = True
        parts.append(note)
    idx = np.flatnonzero(mask)
    theta = np.full(m, np.nan)
    if idx.size:
        theta[idx] = _theta_of(s, freq[idx], n_bins, n_covers)
    parts.append(f"{idx.size:,} of {m:,} grid frequencies evaluated on all {n:,} points")
    return theta, "; ".join(parts)


# --------------------------------------------------------------------------- P or 2P: the verdict
# (made by :func:`varstar.period.p_or_2p.choose_p_or_2p`, which folds with phase neighbours)


@dataclass(frozen=True)
class PeriodChoice(Result):
    """Which of P = 1/f and 2P the folded light curve supports.

    Attributes
    ----------
    factor : int
        1 (keep P) or 2 (the curve repeats only after 2P).
    frequency : float
        The candidate frequency after refinement (cycles/day); P = 1/frequency.
    period : float
        The chosen period, ``factor / frequency`` (days).
    theta_p, theta_2p : float
        PDM theta at P (``n_bins`` bins) and at 2P (``2 n_bins`` bins), i.e. bins of
        the same width in time at both periods.
    cv_p, cv_2p : float
        Weighted mean squared leave-one-out prediction error (mag^2) when each point
        is predicted from its phase neighbours at P and at 2P.
    z : float
        ``(cv_p - cv_2p)`` in units of its standard error: large and positive when
        the 2P fold predicts the points clearly better.
    z_crit : float
        Threshold on ``z`` used for the choice.
    note : str
        The verdict in plain words.
    """

    factor: int
    frequency: float
    period: float
    theta_p: float
    theta_2p: float
    cv_p: float
    cv_2p: float
    z: float
    z_crit: float
    note: str

    def __iter__(self):
        """Unpack as ``factor, theta_p, theta_2p, note``."""
        return iter((self.factor, self.theta_p, self.theta_2p, self.note))

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict: the method, then the fields."""
        return {
            "method": "leave-one-out prediction from phase neighbours at P and 2P; PDM theta at equal bin width",
            **super().to_dict(),
        }

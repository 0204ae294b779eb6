"""What is measured on a fitted eclipse template (:mod:`varstar.period.template`).

The brightest point, the primary minimum (the template's LARGEST magnitude) and
the most prominent other minimum; whether the folded data cover a minimum; its
mid-phase by the bisector of chords with the gradient in the coefficients; and
:func:`measure_minima`, which turns these into epochs, depths, the secondary's
phase and their errors.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.interpolate import BSpline
from scipy.optimize import brentq
from scipy.signal import find_peaks, peak_prominences

from varstar.period.template_basis import basis_at, periodic_spline

__all__ = ["Minima", "bisector", "covered", "cycles_seen", "extrema", "measure_minima"]

_BISECTOR_LEVELS = (0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8)  # fractions of a minimum's depth
_MAX_GAP_SPAN = 1.0 / 3.0  # largest empty stretch inside a minimum's half-depth span (fraction of it)
_MAX_GAP_CROSSING = 1.0 / 8.0  # largest empty stretch around a bisector crossing (same unit)


def _fine_grid(knots: np.ndarray, per_interval: int = 24) -> np.ndarray:
    """Phases covering every knot interval densely (narrow eclipses have many short intervals)."""
    ext = np.concatenate([knots, [knots[0] + 1.0]])
    frac = np.arange(per_interval) / per_interval
    grid = (ext[:-1, None] + np.diff(ext)[:, None] * frac[None, :]).ravel()
    uniform = np.arange(2048) / 2048.0
    return np.sort(np.mod(np.concatenate([grid, uniform]), 1.0))


def _polish(spl: BSpline, d1: BSpline, d2: BSpline, x: float, h: float) -> float:
    """Newton iterations on ``S'(x) = 0`` kept within ``+-h`` of the grid extremum."""
    x0 = x
    for _ in range(50):
        a, b = float(d1(x)), float(d2(x))
        if b == 0.0:
            break
        step = a / b
        x_new = min(max(x - step, x0 - h), x0 + h)
        if abs(x_new - x) < 1e-14:
            x = x_new
            break
        x = x_new
    return x


def extrema(knots: np.ndarray, coef: np.ndarray):
    """The template's brightest point, its deepest minimum and its most prominent other minimum.

    Minima of light are local maxima of the magnitude.  The second minimum is the
    local maximum of largest topographic prominence (height above the highest
    saddle that joins it to the deepest minimum; :func:`scipy.signal.peak_prominences`
    on the cycle cut open at the deepest minimum), not simply the second-highest
    point, which may be a ripple on the shoulder of the deepest minimum.

    Returns the spline, the phase of the brightest point, the phase of the deepest
    minimum, and ``(phase, saddle phase)`` of the second minimum or None.
    """
    spl = periodic_spline(knots, coef)
    d1, d2 = spl.derivative(1), spl.derivative(2)
    grid = _fine_grid(knots)
    vals = spl(grid)
    h = float(np.max(np.diff(np.concatenate([grid, [grid[0] + 1.0]]))))
    i_bright = int(np.argmin(vals))
    bright = _polish(spl, d1, d2, grid[i_bright], h)
    if spl(bright) > vals[i_bright]:
        bright = float(grid[i_bright])
    i_max = int(np.argmax(vals))
    deepest = _polish(spl, d1, d2, grid[i_max], h)
    if spl(deepest) < vals[i_max]:
        deepest = float(grid[i_max])
    # cut the cycle open at the deepest minimum, which then closes both ends
    m = vals.size
    ring = np.append(np.roll(vals, -i_max), vals[i_max])
    peaks, _ = find_peaks(ring)
    second = None
    if peaks.size:
        prom, left, right = peak_prominences(ring, peaks)
        j = int(np.argmax(prom))
        base = left[j] if ring[left[j]] >= ring[right[j]] else right[j]
        x = _polish(spl, d1, d2, grid[(peaks[j] + i_max) % m], h)
        if spl(x) < ring[peaks[j]]:
            x = float(grid[(peaks[j] + i_max) % m])
        second = (float(x), float(grid[(base + i_max) % m]))
    return spl, float(bright), float(deepest), second


def _half_depth_span(spl: BSpline, x: float, v_bright: float) -> tuple[float, float]:
    """Phase offsets ``(a, b)`` from ``x`` where the minimum at ``x`` is deeper than half its depth."""
    level = v_bright + 0.5 * (float(spl(x)) - v_bright)
    u = np.arange(-4096, 4097) / 8192.0  # offsets from x over one cycle
    deep = spl(x + u) > level
    lo = np.flatnonzero(~deep[:4096])
    hi = np.flatnonzero(~deep[4097:])
    return (float(u[lo[-1]]) if lo.size else -0.5), (float(u[4097 + hi[0]]) if hi.size else 0.5)


def covered(spl: BSpline, x: float, v_bright: float, phase: np.ndarray) -> bool:
    """Whether the folded data cover the minimum at phase ``x`` well enough to time and measure it.

    The part of the minimum deeper than half its depth (from the template) must
    hold points with no empty stretch longer than ``_MAX_GAP_SPAN`` of its width.
    A minimum seen only on its ingress, or only on its egress, fails: its bottom
    is then whatever the template does across the gap, and no error computed from
    the model could say how wrong that is.
    """
    a, b = _half_depth_span(spl, x, v_bright)
    off = np.mod(phase - x + 0.5, 1.0) - 0.5
    inside = np.sort(off[(off > a) & (off < b)])
    gaps = np.diff(np.concatenate([[a], inside, [b]]))
    return bool(gaps.max() <= _MAX_GAP_SPAN * (b - a))


def cycles_seen(spl: BSpline, x: float, v_bright: float, f: float, tau: np.ndarray) -> int:
    """Number of distinct cycles with data in the part of the minimum at ``x`` deeper than half its depth."""
    a, b = _half_depth_span(spl, x, v_bright)
    u = f * tau - x + 0.5
    cycle = np.floor(u)
    off = u - cycle - 0.5
    return int(np.unique(cycle[(off > a) & (off < b)]).size)


def _gap_at(x: float, phase_sorted: np.ndarray) -> float:
    """Length of the empty phase interval of the folded data that contains ``x`` (0 on a point)."""
    x = x % 1.0
    i = int(np.searchsorted(phase_sorted, x))
    left = phase_sorted[i - 1] if i > 0 else phase_sorted[-1] - 1.0
    right = phase_sorted[i] if i < phase_sorted.size else phase_sorted[0] + 1.0
    return float(right - left)


def bisector(
    spl: BSpline, knots: np.ndarray, x_min: float, x_bright: float, phase_sorted: np.ndarray
) -> tuple[float, np.ndarray]:
    """Mid-phase of a minimum from the bisector of the template, and its gradient in ``c``.

    At each level ``v_b + q (v_min - v_b)``, ``q`` in ``_BISECTOR_LEVELS``, the
    template is crossed once on the ingress and once on the egress; the minimum's
    phase is the mean of the mid-points.  A level is used only when both its
    crossings lie where the data are (no empty phase stretch longer than
    ``_MAX_GAP_CROSSING`` of the half-depth width around them), so that the
    template is not interpolated across a gap there.  The crossing phases move
    with the coefficients as ``dphi/dc = (dlevel/dc - B(phi)) / S'(phi)``
    (implicit function of ``S(phi) = level``; ``dlevel/dc`` by the envelope
    theorem).  NaN when no level qualifies.
    """
    v_min, v_b = float(spl(x_min)), float(spl(x_bright))
    a, b = _half_depth_span(spl, x_min, v_b)
    max_gap = _MAX_GAP_CROSSING * (b - a)
    d1 = spl.derivative()
    b_min, b_b = basis_at(x_min, knots), basis_at(x_bright, knots)
    u = np.arange(-4096, 4097) / 8192.0
    vals = spl(x_min + u)
    mids, grads = [], []
    for q in _BISECTOR_LEVELS:  # a handful of levels
        level = v_b + q * (v_min - v_b)
        below = vals < level
        lo = np.flatnonzero(below[:4096])
        hi = np.flatnonzero(below[4097:])
        if not (lo.size and hi.size):
            continue
        i, j = lo[-1], 4097 + hi[0]
        fun = lambda x: float(spl(x)) - level  # noqa: E731
        x_in = brentq(fun, x_min + u[i], x_min + u[i + 1], xtol=1e-13)
        x_eg = brentq(fun, x_min + u[j - 1], x_min + u[j], xtol=1e-13)
        if max(_gap_at(x_in, phase_sorted), _gap_at(x_eg, phase_sorted)) > max_gap:
            continue
        dlevel = (1.0 - q) * b_b + q * b_min
        g_in = (dlevel - basis_at(x_in, knots)) / float(d1(x_in))
        g_eg = (dlevel - basis_at(x_eg, knots)) / float(d1(x_eg))
        mids.append(0.5 * (x_in + x_eg))
        grads.append(0.5 * (g_in + g_eg))
    if not mids:
        return float("nan"), np.full(knots.size, np.nan)
    return float(np.mean(mids)), np.mean(grads, axis=0)



@dataclass(frozen=True)
class Minima:
    """The minima of a fitted template, as :func:`measure_minima` measures them (NaN where not determined).

    ``ptp_amplitude_err`` is NaN when the primary minimum is not covered;
    ``secondary_note`` says why the secondary's values are NaN (or is empty);
    ``cycles_seen`` is the most distinct cycles with data in a (significant)
    minimum's deeper half.  The other attributes are those of
    :class:`varstar.period.template.TemplateFit`.
    """

    ptp_amplitude: float
    ptp_amplitude_err: float
    primary_covered: bool
    epoch_min_light: float
    epoch_min_light_err: float
    primary_depth: float
    primary_depth_err: float
    secondary_depth: float
    secondary_depth_err: float
    secondary_phase: float
    secondary_phase_err: float
    secondary_note: str
    cycles_seen: int


def measure_minima(
    knots: np.ndarray,
    coef: np.ndarray,
    f: float,
    tau: np.ndarray,
    t_ref: float,
    errors: Callable[[np.ndarray], float],
) -> Minima:
    """Epoch, depths and phases of the minima of the template ``(knots, coef)`` at frequency ``f``.

    Parameters
    ----------
    knots, coef : np.ndarray
        The template (knot phases in [0, 1) and spline coefficients).
    f : float
        Its frequency (cycles/day).
    tau : np.ndarray
        ``t - t_ref`` of the data points.
    t_ref : float
        Phase origin (days).
    errors : callable
        ``errors(g)``: 1-sigma error of the linear function with gradient ``g`` in
        the parameters ``(c_0 .. c_{K-1}, f)``.
    """
    k = knots.size
    n_par = k + 1
    # extrema of the template: primary minimum = largest magnitude
    spl, x_bright, x_prim, second = extrema(knots, coef)
    phase = np.mod(f * tau, 1.0)
    phase_sorted = np.sort(phase)
    v_bright = float(spl(x_bright))
    b_bright = basis_at(x_bright, knots)

    def mid_phase(x: float) -> tuple[float, np.ndarray]:
        xm, gm = bisector(spl, knots, x, x_bright, phase_sorted)
        g = np.zeros(n_par)
        g[:k] = gm
        return xm, g

    def depth(x: float) -> tuple[float, float]:
        g = np.zeros(n_par)
        g[:k] = basis_at(x, knots) - b_bright  # envelope theorem: the extrema do not move the values
        return float(spl(x)) - v_bright, errors(g)

    nan = float("nan")
    ptp, ptp_err = depth(x_prim)
    prim_ok = covered(spl, x_prim, v_bright, phase)
    x_mid, g_prim = mid_phase(x_prim) if prim_ok else (nan, None)
    prim_ok = prim_ok and math.isfinite(x_mid)
    epoch = epoch_err = prim_depth = prim_depth_err = nan
    if prim_ok:
        x_c = (x_mid + 0.5) % 1.0 - 0.5  # the epoch nearest t_ref
        epoch = t_ref + x_c / f
        g_epoch = g_prim / f
        g_epoch[k] = -x_c / f**2
        epoch_err = errors(g_epoch)
        prim_depth, prim_depth_err = ptp, ptp_err
    sec_depth = sec_depth_err = sec_phase = sec_phase_err = nan
    sec_note = ""
    sec_significant = False
    if second is not None:
        x_sec, x_saddle = second
        d_sec, d_sec_err = depth(x_sec)
        g = np.zeros(n_par)
        g[:k] = basis_at(x_sec, knots) - basis_at(x_saddle, knots)
        prominence, prominence_err = float(spl(x_sec) - spl(x_saddle)), errors(g)
        sec_significant = prominence >= 3.0 * prominence_err
        if not sec_significant:
            sec_note = (
                f"no significant second minimum: the template's next minimum rises only "
                f"{prominence:.4f} +- {prominence_err:.4f} mag above the light between "
                "(secondary depth and phase are NaN)"
            )
        elif not covered(spl, x_sec, v_bright, phase):
            sec_note = "the data leave a gap in the second minimum: its depth and phase are reported as NaN"
        else:
            sec_depth, sec_depth_err = d_sec, d_sec_err
            x_sm, g_sec = mid_phase(x_sec)
            if prim_ok and math.isfinite(x_sm):
                sec_phase = (x_sm - x_mid) % 1.0
                sec_phase_err = errors(g_sec - g_prim)
    seen = [cycles_seen(spl, x_prim, v_bright, f, tau)]
    if sec_significant:
        seen.append(cycles_seen(spl, second[0], v_bright, f, tau))
    return Minima(
        ptp_amplitude=float(ptp),
        ptp_amplitude_err=float(ptp_err) if prim_ok else nan,
        primary_covered=bool(prim_ok),
        epoch_min_light=float(epoch),
        epoch_min_light_err=float(epoch_err),
        primary_depth=float(prim_depth),
        primary_depth_err=float(prim_depth_err),
        secondary_depth=float(sec_depth),
        secondary_depth_err=float(sec_depth_err),
        secondary_phase=float(sec_phase),
        secondary_phase_err=float(sec_phase_err),
        secondary_note=sec_note,
        cycles_seen=int(max(seen)),
    )

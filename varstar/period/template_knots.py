"""Where the eclipse template looks and where its knots go (:mod:`varstar.period.template`).

* The locator scan: the chi-square of a periodic broken-line fold on a grid of
  frequencies around the starting one, whose deepest minima are the starting
  points of the template fit (:func:`scan_candidates`).
* Knot placement by equidistribution of a density (de Boor 1978): a binned pilot
  fold (:func:`pilot_fold`), its variation in excess of the noise
  (:func:`variation_density`), knots at equal quantiles of that density mixed
  with a uniform one (:func:`place_knots`), then thinned until every knot interval
  holds enough folded points (:func:`thin_knots`).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["MIN_KNOTS", "pilot_fold", "place_knots", "scan_candidates", "thin_knots", "variation_density"]

MIN_KNOTS = 6  # fewest knots of a template
_SCAN_HALF_SPAN = 0.75  # locator scan: f0 +- this / T
_CHUNK_ELEMENTS = 2_000_000  # phases computed at once in the scan
_SCAN_MAX_POINTS = 10_000  # points used by the coarse locator scan
_N_CANDIDATES = 3  # starting frequencies carried from the scan to the template fit


# --------------------------------------------------------------------------- locator scan


def _linear_fold_chi2(tau: np.ndarray, y: np.ndarray, w: np.ndarray, freq: np.ndarray, n_knots: int) -> np.ndarray:
    """Weighted chi-square of a periodic piecewise-linear fold with ``n_knots`` even knots, per frequency.

    The fold is the least-squares broken line through the folded points (degree-1
    B-splines, two non-zeros per point).  Its error on a steep eclipse branch
    grows with the curvature times the knot spacing squared, where a binned
    (piecewise-constant) fold errs by the slope times the bin width, which on
    narrow eclipses swamps the noise and ranks trial frequencies by how points
    happen to fall into bins.  For a chunk of frequencies the normal matrices
    (cyclic tridiagonal) are accumulated with :func:`numpy.bincount` over
    flattened (frequency, knot) indices and solved together with
    :func:`numpy.linalg.solve`; a tiny ridge fixes knots without data.
    """
    k = n_knots
    total = float(np.sum(w * y * y))
    out = np.empty(freq.size)
    chunk = max(1, min(_CHUNK_ELEMENTS // tau.size, 256))
    eye = np.arange(k)
    nxt = (eye + 1) % k
    for start in range(0, freq.size, chunk):  # loop over chunks of frequencies
        fc = freq[start : start + chunk]
        nf = fc.size
        x = np.multiply.outer(fc, tau)
        x -= np.floor(x)
        x *= k
        j = np.minimum(x.astype(np.intp), k - 1)
        u = x - j
        base = (np.arange(nf, dtype=np.intp) * k)[:, None]
        i0 = (base + j).ravel()
        i1 = (base + (j + 1) % k).ravel()
        a, b = (1.0 - u).ravel(), u.ravel()
        wf = np.broadcast_to(w, x.shape).ravel()
        wyf = np.broadcast_to(w * y, x.shape).ravel()
        size = nf * k
        diag = np.bincount(i0, wf * a * a, size) + np.bincount(i1, wf * b * b, size)
        off = np.bincount(i0, wf * a * b, size).reshape(nf, k)  # couples knot j and j + 1
        rhs = (np.bincount(i0, wyf * a, size) + np.bincount(i1, wyf * b, size)).reshape(nf, k)
        diag = diag.reshape(nf, k)
        gram = np.zeros((nf, k, k))
        gram[:, eye, eye] = diag + 1e-12 * diag.max(axis=1, keepdims=True)
        gram[:, eye, nxt] += off
        gram[:, nxt, eye] += off
        coef = np.linalg.solve(gram, rhs[:, :, None])[:, :, 0]
        out[start : start + chunk] = total - np.sum(rhs * coef, axis=1)
    return out


def scan_candidates(tau: np.ndarray, y: np.ndarray, w: np.ndarray, f0: float, span: float) -> tuple[list, float, int]:
    """Starting frequencies near ``f0``: the deepest local minima of a broken-line fold's chi-square.

    Returns up to ``_N_CANDIDATES`` frequencies (best first), the grid step and the
    number of bins for the pilot folds.  Neighbouring trials drift by at most half
    a knot spacing in phase over the time span.
    """
    n = tau.size
    bins = int(np.clip(n // 10, 8, 64))
    pilot_bins = int(np.clip(n // 6, 16, 256))
    step = 1.0 / (2.0 * bins * span)
    half = math.ceil(_SCAN_HALF_SPAN / span / step)
    grid = f0 + np.arange(-half, half + 1) * step
    grid = grid[grid > 0]
    # the scan only has to land in the right basins: every k-th point suffices
    sub = slice(None, None, max(1, math.ceil(n / _SCAN_MAX_POINTS)))
    chi2 = _linear_fold_chi2(tau[sub], y[sub], w[sub], grid, bins)
    padded = np.concatenate([[np.inf], chi2, [np.inf]])
    minima = np.flatnonzero((chi2 <= padded[:-2]) & (chi2 <= padded[2:]))
    chosen: list[int] = []
    for i in minima[np.argsort(chi2[minima])]:
        if all(abs(int(i) - j) > 2 for j in chosen):
            chosen.append(int(i))
        if len(chosen) == _N_CANDIDATES:
            break
    return [float(grid[i]) for i in chosen], step, pilot_bins


# --------------------------------------------------------------------------- knots


def pilot_fold(tau, y, w, f, n_bins):
    """Binned fold: bin means (NaN where empty), their errors and an occupancy mask.

    The errors of the bin means are scaled by the scatter seen within the bins
    (their reduced chi-square), so that the knot placement does not depend on
    the overall scale of the stated errors.
    """
    ph = f * tau
    ph -= np.floor(ph)
    idx = np.minimum((ph * n_bins).astype(np.intp), n_bins - 1)
    cnt = np.bincount(idx, minlength=n_bins)
    sw = np.bincount(idx, weights=w, minlength=n_bins)
    swy = np.bincount(idx, weights=w * y, minlength=n_bins)
    has = sw > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(has, swy / sw, np.nan)
        within = float(np.sum(w * (y - mean[idx]) ** 2))
        dof = int(cnt.sum() - np.count_nonzero(has))
        scale = within / dof if dof > 0 and within > 0 else 1.0
        err = np.where(has, np.sqrt(scale / sw), np.nan)
    return mean, err, has


def variation_density(mean: np.ndarray, err: np.ndarray, has: np.ndarray) -> np.ndarray:
    """Per-bin variation of the folded curve in excess of its noise (not normalised)."""
    n_bins = mean.size
    centres = (np.arange(n_bins) + 0.5) / n_bins
    filled = np.interp(centres, centres[has], mean[has], period=1.0)
    efill = np.interp(centres, centres[has], err[has], period=1.0)
    diff = np.abs(np.roll(filled, -1) - filled)
    noise = np.hypot(efill, np.roll(efill, -1))
    excess = np.maximum(diff - noise, 0.0)
    # spread over +-2 bins so that eclipse bottoms (flat slope, high curvature) get knots too
    kernel = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
    return sum(k * np.roll(excess, s) for k, s in zip(kernel, range(-2, 3)))


def place_knots(variation: np.ndarray, has: np.ndarray, alpha: float, n_knots: int) -> np.ndarray:
    """Knots at equal quantiles of the mixed density (uniform + variation, both over phases with data)."""
    n_bins = has.size
    support = has | np.roll(has, 1) | np.roll(has, -1)
    dens = support / support.sum()
    var = variation * support
    vs = var.sum()
    if alpha > 0 and vs > 0:
        dens = (1.0 - alpha) * dens + alpha * var / vs
    cdf = np.concatenate([[0.0], np.cumsum(dens)])
    cdf /= cdf[-1]
    edges = np.arange(n_bins + 1) / n_bins
    keep = np.concatenate([[True], np.diff(cdf) > 0])  # strictly increasing for np.interp
    q = (np.arange(n_knots) + 0.5) / n_knots
    return np.unique(np.interp(q, cdf[keep], edges[keep]))


def thin_knots(knots: np.ndarray, phase_sorted: np.ndarray, min_points: int) -> np.ndarray:
    """Remove knots until every knot interval holds at least ``min_points`` folded points.

    A cubic piece over an interval with fewer points than its four local degrees of
    freedom is fixed only by continuity with its neighbours and can overshoot
    (a spurious spike inside an eclipse that few nights covered).  The interval
    with the fewest points is merged with its emptier neighbour, one knot at a
    time (a loop over knots, at most a few hundred).
    """
    kn = knots.copy()
    while kn.size > MIN_KNOTS:
        pos = np.searchsorted(phase_sorted, kn)
        counts = np.diff(np.concatenate([pos, [pos[0] + phase_sorted.size]]))  # interval i: kn[i]..kn[i+1]
        i = int(np.argmin(counts))
        if counts[i] >= min_points:
            break
        left, right = counts[i - 1], counts[(i + 1) % kn.size]
        drop = i if left <= right else (i + 1) % kn.size  # the knot shared with the emptier neighbour
        kn = np.delete(kn, drop)
    return kn


"""Period of a strictly periodic star from a template of its own folded curve.

A Fourier series of a few harmonics (:mod:`varstar.period.refine`) cannot follow
the narrow eclipses of a detached binary: what it leaves in the residuals is
periodic, so the fitted period is pulled wherever the sampling of the eclipses is
uneven, and its covariance error, which assumes the model is right, is far too
small.  This module fits a model flexible enough to follow such a curve.

Model
-----
The magnitude at time ``t`` is a periodic cubic B-spline ``S`` of the phase

.. math::

    y(t) = S(\\varphi), \\qquad \\varphi = f\\,(t - t_{ref}) \\bmod 1,
    \\qquad S(\\varphi) = \\sum_{j=0}^{K-1} c_j B_j(\\varphi),

with ``K`` knots in one cycle (de Boor 1978, *A Practical Guide to Splines*,
Springer; evaluated with :class:`scipy.interpolate.BSpline`, periodic extension,
so ``S`` is twice continuously differentiable across phase 0).  The ``K``
coefficients ``c_j`` are linear parameters, the frequency ``f`` the only
non-linear one.  ``t_ref`` is the weighted mean time (weights ``1/dy**2``): at
that reference a change of ``f`` pivots the fold about the middle of the data, so
the eclipses stay where the knots were put and ``f`` is almost uncorrelated with
``c``.

Knots
-----
Equally spaced knots waste parameters on the flat parts of a detached binary and
still miss the eclipses.  The knots are therefore placed by equidistribution of
a density, the idea of de Boor's knot placement (de Boor 1978): a first fold at
the located frequency is binned, its bin-to-bin variation in excess of the noise
(spread over +-2 bins so that eclipse bottoms get knots too) is the density,
mixed with a uniform density over the phases that hold data, and the knots are
put at equal quantiles of the mixture.  A mixing weight ``alpha = 0`` gives
equally spaced knots (right for a smooth pulsator), ``alpha`` near 1 puts most
knots in the eclipses.  Knots are then removed until every knot interval holds
at least ``_MIN_POINTS_PER_INTERVAL`` folded points (a cubic piece over fewer
points than its four local degrees of freedom overshoots in a gap of the phase
coverage).  For ``alpha`` in (0, 0.6, 0.9) and a ladder of knot numbers ``K``
(6, 9, 14, 21, ..., each 50 % more than the last, at most 160 and a third of
the points; each ladder abandoned after two steps without a gain, and the best
knot number then refined halfway in ratio to its neighbours) the knot set with
the smallest Akaike information criterion

.. math::

    \\mathrm{AIC} = N \\ln(\\chi^2 / N) + 2P, \\qquad P = K + 1,

is kept (Akaike 1974, IEEE Trans. Autom. Control 19, 716).  This is ``-2 ln L``
(up to a constant) for Gaussian errors whose stated covariance, nightly terms
included, has a free overall scale: the same assumption as the reduced-chi-square
factor on the covariance below.  With honest errors (``chi2 ~ N``) it is
``chi2 + 2P`` to first order; with errors that are all too small or too large by
a common factor, as photometric errors often are, the choice of ``K`` does not
change.

AIC rather than BIC: no spline is the true light curve, and under such
misspecification AIC is the criterion that minimises the expected prediction
error (BIC is consistent only when the true model is among the candidates, and
its ``ln N`` penalty grows with the data while the template's shortfall in the
eclipses does not shrink).  For the period the asymmetry matters too: a template
that is too stiff leaves systematic residuals that bias the timing of the
eclipses, while a few surplus knots only add a little variance, nearly
orthogonal to the frequency.

Fit and errors
--------------
1. *Locator.*  The starting frequency may be off by up to about ``0.5/T``
   (``T`` the time span), which smears narrow eclipses completely, so a grid of
   frequencies over ``+-0.75/T`` is scanned with the chi-square of a broken-line
   (piecewise-linear) fold, plain ``1/dy**2`` weights and at most 10,000 points;
   its three deepest local minima are starting points.  Around each, the
   generalised profile chi-square of a template with evenly spaced knots is
   evaluated on a grid of +-2 scan steps and refined by a few Gauss-Newton
   steps, and the best basin by AIC is kept (see :func:`_search` for why the
   knots are even here).  Another basin within 10 in AIC is reported as a
   warning (an ambiguous cycle count), as is a fit in which no minimum was
   observed in more than one cycle (the period is then not fixed by the data).
2. *Profile fit.*  For a trial ``f`` the coefficients are solved exactly by
   generalised least squares; the profile ``chi2(f)`` is minimised by
   Gauss-Newton steps on ``f`` with the analytic derivative
   ``dy/df = S'(phi) (t - t_ref)`` (variable projection, Golub & Pereyra 1973,
   SIAM J. Numer. Anal. 10, 413), halving a step that does not lower ``chi2``.
3. *Covariance.*  Every residual is whitened with
   :func:`varstar.period.nightly.nightly_whitener`, and every normal matrix is
   the one of the whitened design (formed in the structured way described in
   ``_Gls``), i.e. the covariance of the data is ``diag(dy**2)`` plus
   ``c_g**2`` shared by all points of night ``g``.
   The model covariance of ``(c, f)`` is ``(J^T C^-1 J)^-1`` at the solution,
   **always multiplied by the reduced chi-square** ``chi2/dof`` as in
   :mod:`varstar.period.refine`.  Its frequency element is the Gauss-Newton
   form of ``2 / (d^2 chi2 / df^2)`` for the profile chi-square; the profile's
   actual curvature (central difference over +-2 sigma) is a few per cent
   flatter in our simulations.
   The actual curvature is flatter because the exact second derivative of a
   variable-projection functional has a second-order term that the Gauss-Newton
   form leaves out (Golub & Pereyra 1973).  Every error is the larger of this
   model error and the sandwich error (see ``_Errors``), which stays right when
   the template cannot follow the curve exactly; the frequency error is in
   addition at least ``sqrt(2 chi2/dof / (d^2 chi2/df^2))`` from the actual
   curvature.
   ``period_err = frequency_err / f**2``.

Derived quantities
------------------
Magnitudes grow as the star fades, so the *primary minimum* is the minimum where
the template reaches its LARGEST value, the *secondary* the other local maximum
of ``S`` of largest topographic prominence (height above the saddle joining it
to the primary), reported only when that prominence exceeds three times its
error.  The time of a minimum is its mid-point by the bisector of
chords (common practice in eclipse timing): at levels of 20, 30, ... 80 % of the
minimum's depth the template's ingress and egress crossings are found and their
mid-points averaged.  For a symmetric minimum this is the phase of the largest
magnitude itself, but it is measured on the steep branches, where the timing
information is; the exact top of a flexible template wanders with the noise at
the flat bottom of an eclipse.  A level counts only where both its crossings lie
among data (no empty phase stretch there longer than 1/8 of the half-depth
width).  The error comes from the covariance through the implicit-function
derivatives of the crossings (``dphi/dc = (dlevel/dc - B(phi)) / S'(phi)``) and
``dt/df = -phi/f**2``; the epoch reported is the one nearest ``t_ref``.  (For
the asymmetric minimum of a pulsating star the bisector mid-point is not the
time of the faintest point.)

A minimum is measured only when the folded data cover it: its part deeper than
half its depth must hold points with no empty stretch longer than a third of its
width.  A minimum seen only on its ingress or only on its egress is not
determined by the data (the template just bridges the gap, and no model error
can say by how much it is wrong), so its epoch, depth and phase are NaN with a
warning; the period does not need it.  Depths are measured from the brightest
point of the template (its smallest value), with errors by the envelope theorem
(the extremum positions do not move the values to first order).  The phase of
the secondary after the primary is 0.5 for a circular orbit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.interpolate import BSpline
from scipy.linalg import LinAlgError, cho_factor, cho_solve, lapack
from scipy.optimize import brentq
from scipy.signal import find_peaks, peak_prominences

from varstar.errors import InputError, ReductionError
from varstar.results import json_float as _jf, sd
from varstar.period.nightly import nightly_whitener
from varstar.period.refine import _check_series

__all__ = ["TemplateFit", "fit_template_period"]

_DEGREE = 3  # cubic B-splines
_SCAN_HALF_SPAN = 0.75  # locator scan: f0 +- this / T
_ALPHAS = (0.0, 0.6, 0.9)  # weight of the variation density in the knot density
_MIN_KNOTS = 6
_MAX_KNOTS = 160
_KNOT_RATIO = 1.5  # coarse ladder of knot numbers: each 50 % more than the last
_PATIENCE = 2  # ladder steps without an AIC gain before a ladder is abandoned
_MIN_POINTS_PER_INTERVAL = 4
_BISECTOR_LEVELS = (0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8)  # fractions of a minimum's depth
_MAX_GAP_SPAN = 1.0 / 3.0  # largest empty stretch inside a minimum's half-depth span (fraction of it)
_MAX_GAP_CROSSING = 1.0 / 8.0  # largest empty stretch around a bisector crossing (same unit)
_COND_LIMIT = 1e11  # condition number of the (Jacobi-scaled) normal matrix
_CHUNK_ELEMENTS = 2_000_000  # phases computed at once in the scan
_SCAN_MAX_POINTS = 10_000  # points used by the coarse locator scan
_N_CANDIDATES = 3  # starting frequencies carried from the scan to the template fit
_LOCATOR_KNOTS = 200  # evenly spaced knots of the locating template (at most)
_LOCATOR_MAX_POINTS = 10_000  # points used to compare the basins
_RIVAL_AIC = 10.0  # a rival frequency closer than this in AIC is reported
_MAX_ITER = 40


# --------------------------------------------------------------------------- spline basis


def _extended_knots(knots: np.ndarray) -> np.ndarray:
    """Knot vector of the periodic cubic spline with interior knots ``knots`` in [0, 1)."""
    n = knots.size
    return np.concatenate([knots[n - _DEGREE :] - 1.0, knots, knots[: _DEGREE + 1] + 1.0])


def _base_phase(phase: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Phases mapped into the base interval ``[knots[0], knots[0] + 1)``."""
    x = knots[0] + np.mod(phase - knots[0], 1.0)
    return np.minimum(x, np.nextafter(knots[0] + 1.0, -np.inf))


class _Design:
    """Design matrix ``B`` (``N x K``) of the periodic cubic B-spline at given phases.

    Every row has four non-zero values, in columns ``first, first + 1, first + 2,
    first + 3`` (modulo ``K``); the values come from
    :meth:`scipy.interpolate.BSpline.design_matrix` on the extended knot vector,
    whose last three B-splines are the first three shifted by one period.
    Products with ``B`` are four gathers or four :func:`numpy.bincount` calls over
    the points, cheaper than general sparse products for this fixed pattern.
    """

    def __init__(self, phase: np.ndarray, knots: np.ndarray) -> None:
        k = knots.size
        # the phases are already in the base interval; extrapolate=True only skips scipy's
        # bounds check (a Python-level min/max over all points)
        d = BSpline.design_matrix(_base_phase(phase, knots), _extended_knots(knots), _DEGREE, extrapolate=True)
        n = phase.size
        self.k, self.n = k, n
        self.values = np.asarray(d.data, dtype=float).reshape(n, _DEGREE + 1)
        first = np.asarray(d.indices).reshape(n, _DEGREE + 1)[:, 0]
        self.cols = (first[:, None] + np.arange(_DEGREE + 1)[None, :]) % k  # (N, 4)

    def __matmul__(self, c: np.ndarray) -> np.ndarray:
        """``B c``."""
        return np.einsum("ij,ij->i", self.values, c[self.cols])

    def rmatvec(self, v: np.ndarray) -> np.ndarray:
        """``B^T v``."""
        return np.bincount(self.cols.ravel(), (self.values * v[:, None]).ravel(), self.k)

    def gram(self, w: np.ndarray) -> np.ndarray:
        """``B^T diag(w) B`` as a dense ``K x K`` matrix.

        Non-zeros ``a`` and ``b`` of a row sit in columns ``i = first + a`` and
        ``i + (b - a)``, so each pair adds to one (cyclic) diagonal of the matrix:
        ten :func:`numpy.bincount` calls into ``K`` bins (pairs ``a <= b``, then the
        mirror image), a loop over the pairs, not over the points.
        """
        k = self.k
        wv = self.values * w[:, None]
        out = np.zeros((k, k))
        rows = np.arange(k)
        for a in range(_DEGREE + 1):
            for b in range(a, _DEGREE + 1):
                band = np.bincount(self.cols[:, a], wv[:, a] * self.values[:, b], k)
                cols = (rows + (b - a)) % k
                out[rows, cols] += band
                if b != a:
                    out[cols, rows] += band
        return out

    def grouped(self, w: np.ndarray, codes: np.ndarray, n_groups: int) -> np.ndarray:
        """``P^T diag(w) B`` (groups x K), ``P`` the point-to-group indicator."""
        k = self.k
        idx = (codes[:, None] * k + self.cols).ravel()
        return np.bincount(idx, (self.values * w[:, None]).ravel(), n_groups * k).reshape(n_groups, k)

    def toarray(self) -> np.ndarray:
        out = np.zeros((self.n, self.k))
        np.add.at(out, (np.repeat(np.arange(self.n), _DEGREE + 1), self.cols.ravel()), self.values.ravel())
        return out


def _design(phase: np.ndarray, knots: np.ndarray) -> _Design:
    """Design matrix of the periodic cubic B-spline with ``knots`` at ``phase``."""
    return _Design(phase, knots)


def _spline(knots: np.ndarray, coef: np.ndarray) -> BSpline:
    """The periodic spline as a :class:`scipy.interpolate.BSpline` (derivatives available)."""
    return BSpline(
        _extended_knots(knots), np.concatenate([coef, coef[:_DEGREE]]), _DEGREE, extrapolate="periodic"
    )


def _basis_at(x: float, knots: np.ndarray, nu: int = 0) -> np.ndarray:
    """Values (``nu = 0``) or ``nu``-th derivatives of the ``K`` periodic B-splines at phase ``x``."""
    # a spline whose coefficient vectors are the unit vectors evaluates every basis function at once
    basis = _spline(knots, np.eye(knots.size))
    return np.asarray(basis.derivative(nu)(x) if nu else basis(x), dtype=float)


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


def _candidates(tau: np.ndarray, y: np.ndarray, w: np.ndarray, f0: float, span: float) -> tuple[list, float, int]:
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


def _pilot_fold(tau, y, w, f, n_bins):
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


def _variation_density(mean: np.ndarray, err: np.ndarray, has: np.ndarray) -> np.ndarray:
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


def _knots(variation: np.ndarray, has: np.ndarray, alpha: float, n_knots: int) -> np.ndarray:
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


def _thin_knots(knots: np.ndarray, phase_sorted: np.ndarray, min_points: int) -> np.ndarray:
    """Remove knots until every knot interval holds at least ``min_points`` folded points.

    A cubic piece over an interval with fewer points than its four local degrees of
    freedom is fixed only by continuity with its neighbours and can overshoot
    (a spurious spike inside an eclipse that few nights covered).  The interval
    with the fewest points is merged with its emptier neighbour, one knot at a
    time (a loop over knots, at most a few hundred).
    """
    kn = knots.copy()
    while kn.size > _MIN_KNOTS:
        pos = np.searchsorted(phase_sorted, kn)
        counts = np.diff(np.concatenate([pos, [pos[0] + phase_sorted.size]]))  # interval i: kn[i]..kn[i+1]
        i = int(np.argmin(counts))
        if counts[i] >= min_points:
            break
        left, right = counts[i - 1], counts[(i + 1) % kn.size]
        drop = i if left <= right else (i + 1) % kn.size  # the knot shared with the emptier neighbour
        kn = np.delete(kn, drop)
    return kn


# --------------------------------------------------------------------------- GLS core


class _Gls:
    """Generalised least squares with the nightly covariance of :mod:`varstar.period.nightly`.

    Residuals are whitened with the module's callable ``L`` (so the chi-square is
    ``|L r|^2``).  Normal equations are formed without whitening the ``N x K``
    design column by column: with ``C^-1 = L^T L = W - W P Gamma P^T W``
    (``P`` the point-to-night indicator, ``Gamma = diag(c_g^2 / (1 + c_g^2 s_g))``,
    the Sherman-Morrison form quoted in that module),

    ``B^T C^-1 B = B^T W B - H^T Gamma H``,  ``H = P^T W B``  (nights x K),

    which keeps the 4-non-zero rows of the spline design sparse: O(N K) work
    instead of O(N K^2).  ``Gamma`` is read off the whitener itself: for a vector
    of ones ``(L 1)_i = (1/dy_i) / sqrt(1 + c_g^2 s_g)``, so both modules use the
    same shared errors whatever form ``group_err`` was given in.
    """

    def __init__(self, y: np.ndarray, dy: np.ndarray, group: Any, group_err: Any) -> None:
        self.whiten = nightly_whitener(dy, group, group_err)
        self.w = dy**-2.0
        self.y, self.dy = y, dy
        self.group = None if group is None else np.asarray(group)
        self.active = bool(self.whiten.active)
        if self.active:
            codes = np.unique(self.group, return_inverse=True)[1].astype(np.intp).ravel()
            n_groups = int(codes.max()) + 1
            s = np.bincount(codes, weights=self.w, minlength=n_groups)
            shrink = (self.whiten(np.ones_like(y)) * dy) ** 2  # 1 / (1 + c_g^2 s_g), per point
            self.c_point = np.sqrt(np.maximum(1.0 / shrink - 1.0, 0.0) / s[codes])  # c_g of each point
            gamma_i = (1.0 - shrink) / s[codes]
            self.gamma = np.bincount(codes, weights=gamma_i, minlength=n_groups) / np.bincount(
                codes, minlength=n_groups
            )
            self.codes = codes

    def subset(self, idx: Any) -> "_Gls":
        """The same model for the points ``idx`` (their nights keep their shared errors)."""
        if not self.active:
            return _Gls(self.y[idx], self.dy[idx], None, None)
        return _Gls(self.y[idx], self.dy[idx], self.group[idx], self.c_point[idx])

    def cinv(self, v: np.ndarray) -> np.ndarray:
        """``C^-1 v`` for a vector."""
        wv = self.w * v
        if not self.active:
            return wv
        per_night = self.gamma * np.bincount(self.codes, weights=wv, minlength=self.gamma.size)
        return wv - self.w * per_night[self.codes]

    def normal(self, b: _Design) -> np.ndarray:
        """``B^T C^-1 B`` (dense ``K x K``) for a spline design ``B`` (``N x K``)."""
        gram = b.gram(self.w)
        if self.active:
            h = b.grouped(self.w, self.codes, self.gamma.size)
            # einsum, not BLAS: a tiny product, which threaded BLAS makes several times slower
            gram -= np.einsum("gi,gj->ij", h, self.gamma[:, None] * h)
        return gram

    def bt_cinv(self, b: _Design, v: np.ndarray) -> np.ndarray:
        """``B^T C^-1 v``."""
        return b.rmatvec(self.cinv(v))

    def chi2(self, r: np.ndarray) -> float:
        """Generalised chi-square ``|L r|^2`` of residuals ``r``."""
        rw = self.whiten(r)
        return float(rw @ rw)


def _chol(gram: np.ndarray):
    """Cholesky factor of the Jacobi-scaled normal matrix, or None when (nearly) singular.

    The condition number is LAPACK's estimate from the factor (``dpocon``, O(P^2)),
    far cheaper than an eigen-decomposition.
    """
    d = np.sqrt(np.diag(gram))
    if not np.all(d > 0):
        return None
    gs = gram / np.outer(d, d)
    try:
        cho = cho_factor(gs, lower=False, check_finite=False)
    except LinAlgError:
        return None
    rcond, info = lapack.dpocon(cho[0], float(np.abs(gs).sum(axis=0).max()), uplo="U")
    if info != 0 or not rcond > 1.0 / _COND_LIMIT:
        return None
    return cho, d


def _solve(fac, rhs: np.ndarray) -> np.ndarray:
    cho, d = fac
    return (cho_solve(cho, (rhs.T / d).T, check_finite=False).T / d).T


@dataclass(frozen=True, eq=False)
class _Profile:
    chi2: float
    coef: np.ndarray
    resid: np.ndarray
    design: _Design
    gram: np.ndarray
    fac: Any


def _profile(gls: _Gls, tau: np.ndarray, f: float, knots: np.ndarray) -> _Profile | None:
    """Exact GLS template at fixed ``f``: coefficients, chi-square and residuals (None if singular)."""
    b = _design(np.mod(f * tau, 1.0), knots)
    gram = gls.normal(b)
    fac = _chol(gram)
    if fac is None:
        return None
    coef = _solve(fac, gls.bt_cinv(b, gls.y))
    resid = gls.y - b @ coef
    chi2 = gls.chi2(resid)
    return _Profile(chi2, coef, resid, b, gram, fac)


def _freq_column(tau: np.ndarray, f: float, knots: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Derivative of the model with respect to ``f``: ``S'(phi) (t - t_ref)``."""
    return _spline(knots, coef).derivative()(np.mod(f * tau, 1.0)) * tau


def _joint_normal(gls: _Gls, prof: _Profile, j: np.ndarray) -> np.ndarray:
    """Normal matrix ``J^T C^-1 J`` of the parameters ``(c_0 .. c_{K-1}, f)``."""
    cj = gls.cinv(j)
    k = prof.gram.shape[0]
    out = np.empty((k + 1, k + 1))
    out[:k, :k] = prof.gram
    out[:k, k] = out[k, :k] = prof.design.rmatvec(cj)
    out[k, k] = j @ cj
    return out


def _gauss_newton(gls, tau, f, knots, prof, *, max_iter: int = _MAX_ITER, max_halvings: int = 30):
    """Minimise the profile chi-square over ``f`` (variable projection, step halving)."""
    converged = False
    for _ in range(max_iter):
        j = _freq_column(tau, f, knots, prof.coef)
        cj = gls.cinv(j)
        cross = prof.design.rmatvec(cj)
        schur = float(j @ cj - cross @ _solve(prof.fac, cross))  # = (d^2 chi2/df^2) / 2
        if not schur > 0:
            break
        df = float(cj @ prof.resid) / schur  # B^T C^-1 r = 0 at the profile optimum
        sigma = 1.0 / math.sqrt(schur)
        if abs(df) < 1e-4 * sigma:
            converged = True
            break
        accepted = False
        for _ in range(max_halvings):
            trial = _profile(gls, tau, f + df, knots)
            if trial is not None and trial.chi2 <= prof.chi2 * (1.0 + 1e-12) + 1e-12:
                f, prof, accepted = f + df, trial, True
                break
            df *= 0.5
            if abs(df) < 1e-4 * sigma:
                break
        if not accepted:
            converged = abs(df) < 1e-4 * sigma
            break
    return f, prof, converged


def _aic(chi2: float, n_points: int, n_par: int) -> float:
    """Akaike's criterion for Gaussian errors whose stated covariance has a free overall scale."""
    return n_points * math.log(chi2 / n_points) + 2.0 * n_par


def _select_knots(gls, tau, f, variation, has, n_points):
    """Knot set of smallest AIC over the mixing weights and knot numbers.

    A coarse ladder of knot numbers (each ``_KNOT_RATIO`` times the last) is
    climbed for every mixing weight until ``_PATIENCE`` steps bring no gain; the
    best knot number is then refined halfway (in ratio) to its neighbours.
    Returns ``(aic, knots, profile, alpha, requested knot number)`` and the largest
    knot number allowed.
    """
    n_max = int(min(_MAX_KNOTS, (n_points - 2) // 3))
    if n_max < _MIN_KNOTS:
        raise ReductionError(
            f"template fit: {n_points} points cannot constrain a template of {_MIN_KNOTS} knots "
            "and a frequency; more data are needed"
        )
    ladder = []
    k = _MIN_KNOTS
    while k <= n_max:
        ladder.append(k)
        k = max(k + 1, int(round(k * _KNOT_RATIO)))
    phase_sorted = np.sort(np.mod(f * tau, 1.0))
    seen: dict[tuple, float] = {}
    best = None  # (aic, knots, profile, alpha, requested knot number)

    def evaluate(alpha: float, k: int) -> float:
        nonlocal best
        kn = _thin_knots(_knots(variation, has, alpha, k), phase_sorted, _MIN_POINTS_PER_INTERVAL)
        key = tuple(kn)
        if kn.size < 4:
            return math.inf
        if key in seen:  # thinning can map different requests onto one knot set
            return seen[key]
        prof = _profile(gls, tau, f, kn)
        aic = math.inf if prof is None else _aic(prof.chi2, n_points, kn.size + 1)
        seen[key] = aic
        if prof is not None and (best is None or aic < best[0]):
            best = (aic, kn, prof, alpha, k)
        return aic

    alphas = [a for a in _ALPHAS if a == 0 or variation.sum() > 0]
    for alpha in alphas:
        stale, best_alpha = 0, math.inf
        for k in ladder:
            aic = evaluate(alpha, k)
            if aic < best_alpha:
                best_alpha, stale = aic, 0
            else:
                stale += 1
                if stale >= _PATIENCE:
                    break
    if best is not None:
        _, _, _, alpha, k = best
        half = math.sqrt(_KNOT_RATIO)
        for k2 in {int(round(k / half)), int(round(k * half))}:
            if _MIN_KNOTS <= k2 <= n_max and k2 != k:
                evaluate(alpha, k2)
    if best is None:
        raise ReductionError(
            "template fit: every candidate template gave a singular normal matrix; the "
            "phases covered by the data are too few for a template"
        )
    return best, n_max


def _search(gls: _Gls, tau: np.ndarray, y: np.ndarray, w: np.ndarray, f0: float, span: float):
    """Locate the best basin near ``f0``, choose the knots there and converge.

    1. The broken-line fold scan gives a few starting frequencies (:func:`_candidates`).
    2. Around each, the profile chi-square of a template with EVENLY spaced knots
       is evaluated on a grid of +-2 scan steps and the best point refined by
       Gauss-Newton.  Even knots matter here: knots fitted to one trial fold fit
       that fold best and pull the frequency towards it, which can keep the
       search in a neighbouring basin when each eclipse was seen on few nights.
    3. At the best of these the knots are chosen (:func:`_select_knots`), the fit
       converged, then the knots are placed once more on the fold at the converged
       frequency and the fit converged again; the better of the two is kept.

    Returns ``f, knots, profile, alpha, converged, k_max, rivals`` where
    ``rivals`` lists ``(AIC difference, frequency)`` of the other basins.
    """
    n = tau.size
    starts, step, n_bins = _candidates(tau, y - np.sum(w * y) / np.sum(w), w, f0, span)
    # comparing basins needs no more than _LOCATOR_MAX_POINTS points (every k-th one)
    sub = np.arange(0, n, max(1, math.ceil(n / _LOCATOR_MAX_POINTS)))
    gls_sub, tau_sub = (gls, tau) if sub.size == n else (gls.subset(sub), tau[sub])
    n_sub = sub.size
    k_even = int(np.clip(n_sub // 10, _MIN_KNOTS, _LOCATOR_KNOTS))
    basins = []  # (aic, f)
    for f_start in starts:  # a few starting frequencies
        phase_sorted = np.sort(np.mod(f_start * tau_sub, 1.0))
        even = _thin_knots(np.arange(k_even) / k_even, phase_sorted, _MIN_POINTS_PER_INTERVAL)
        grid = f_start + np.arange(-3, 4) * (2.0 * step / 3.0)
        profiles = [(g, _profile(gls_sub, tau_sub, g, even)) for g in grid if g > 0]
        profiles = [(g, p) for g, p in profiles if p is not None]
        if not profiles:
            continue
        g_best, p_best = min(profiles, key=lambda gp: gp[1].chi2)
        # a few steps suffice to compare basins; the chosen one is converged below
        f_fit, p_fit, _ = _gauss_newton(gls_sub, tau_sub, g_best, even, p_best, max_iter=3, max_halvings=3)
        basins.append((_aic(p_fit.chi2, n_sub, even.size + 1), f_fit))
    if not basins:
        raise ReductionError(
            "template fit: every candidate template gave a singular normal matrix; the "
            "phases covered by the data are too few for a template"
        )
    basins.sort()
    aic_loc, f_loc = basins[0]
    # AIC differences of the subsample, scaled to all points
    rivals = [((a - aic_loc) * n / n_sub, fr) for a, fr in basins[1:] if abs(fr - f_loc) > 0.25 / span]

    best = None
    f_pilot = f_loc
    for round_ in range(2):  # knots on the located fold, then once more on the converged one
        mean, err, has = _pilot_fold(tau, y, w, f_pilot, n_bins)
        variation = _variation_density(mean, err, has)
        if round_ == 0:
            (_, knots, prof, alpha, k_request), k_max = _select_knots(gls, tau, f_pilot, variation, has, n)
        else:
            phase_sorted = np.sort(np.mod(f_pilot * tau, 1.0))
            knots = _thin_knots(_knots(variation, has, alpha, k_request), phase_sorted, _MIN_POINTS_PER_INTERVAL)
            prof = _profile(gls, tau, f_pilot, knots)
            if prof is None:
                break
        f_fit, p_fit, conv = _gauss_newton(gls, tau, f_pilot, knots, prof)
        aic = _aic(p_fit.chi2, n, knots.size + 1)
        if best is None or aic < best[0]:
            best = (aic, f_fit, knots, p_fit, conv)
        f_pilot = f_fit
    _, f, knots, prof, converged = best
    return f, knots, prof, alpha, converged, k_max, rivals


# --------------------------------------------------------------------------- extrema


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


def _extrema(knots: np.ndarray, coef: np.ndarray):
    """The template's brightest point, its deepest minimum and its most prominent other minimum.

    Minima of light are local maxima of the magnitude.  The second minimum is the
    local maximum of largest topographic prominence (height above the highest
    saddle that joins it to the deepest minimum; :func:`scipy.signal.peak_prominences`
    on the cycle cut open at the deepest minimum), not simply the second-highest
    point, which may be a ripple on the shoulder of the deepest minimum.

    Returns the spline, the phase of the brightest point, the phase of the deepest
    minimum, and ``(phase, saddle phase)`` of the second minimum or None.
    """
    spl = _spline(knots, coef)
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


def _covered(spl: BSpline, x: float, v_bright: float, phase: np.ndarray) -> bool:
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


def _cycles_seen(spl: BSpline, x: float, v_bright: float, f: float, tau: np.ndarray) -> int:
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


def _bisector(
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
    b_min, b_b = _basis_at(x_min, knots), _basis_at(x_bright, knots)
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
        g_in = (dlevel - _basis_at(x_in, knots)) / float(d1(x_in))
        g_eg = (dlevel - _basis_at(x_eg, knots)) / float(d1(x_eg))
        mids.append(0.5 * (x_in + x_eg))
        grads.append(0.5 * (g_in + g_eg))
    if not mids:
        return float("nan"), np.full(knots.size, np.nan)
    return float(np.mean(mids)), np.mean(grads, axis=0)


class _Errors:
    """Errors of linear functions ``g . theta`` of the parameters ``theta = (c, f)``.

    Two estimates are formed and the larger is reported:

    * the model covariance ``chi2/dof (J^T C^-1 J)^-1``, right when the template
      follows the curve and the (nightly) covariance is right up to a scale;
    * the sandwich (heteroscedasticity-consistent) covariance of Huber (1967,
      Proc. Fifth Berkeley Symp. 1, 221) and White (1980, Econometrica 48, 817),
      ``M J_w^T diag(r_w^2) J_w M`` with ``M = (J^T C^-1 J)^-1``, whitened
      design ``J_w = L J`` and whitened residuals ``r_w``, times ``N/dof``
      (MacKinnon & White 1985, J. Econometrics 29, 305, "HC1").  It stays
      consistent when the template cannot follow the curve exactly: the misfit
      is largest where the curve is steepest, which is where the timing
      information is, and a single reduced chi-square over all points dilutes it.

    For ``g`` the sandwich variance is ``N/dof sum_i (a_i r_w,i)^2`` with
    ``a = L J (M g)``: one whitening of one vector per quantity.
    """

    def __init__(
        self,
        gls: _Gls,
        design: _Design,
        j: np.ndarray,
        resid: np.ndarray,
        m_inv: np.ndarray,
        scale: float,
        dof: int,
    ) -> None:
        self.gls, self.design, self.j = gls, design, j
        self.rw = gls.whiten(resid)
        self.m_inv = m_inv
        self.cov = m_inv * scale
        self.hc_factor = resid.size / dof
        self.k = design.k

    def model_var(self, g: np.ndarray) -> float:
        return float(g @ self.cov @ g)

    def sandwich_var(self, g: np.ndarray) -> float:
        v = self.m_inv @ g
        a = self.gls.whiten(self.design @ v[: self.k] + self.j * v[self.k])
        return float(np.sum((a * self.rw) ** 2)) * self.hc_factor

    def __call__(self, g: np.ndarray) -> float:
        if not np.all(np.isfinite(g)):
            return float("nan")
        var = max(self.model_var(g), self.sandwich_var(g))
        return sd(var)


# --------------------------------------------------------------------------- result


@dataclass(frozen=True, eq=False)
class TemplateFit:
    """A periodic spline template with free frequency, fitted by generalised least squares.

    Attributes
    ----------
    frequency, frequency_err : float
        Fitted frequency (cycles/day) and its 1-sigma error: the largest of the
        profile chi-square's curvature and the model covariance (both scaled by
        the reduced chi-square) and the sandwich estimate (module docstring).
    period, period_err : float
        ``1/frequency`` (days) and ``frequency_err / frequency**2``.
    t_ref : float
        Reference time of the phases (weighted mean time of the data).
    epoch_min_light, epoch_min_light_err : float
        Time of primary minimum nearest ``t_ref``: the bisector mid-point of the
        minimum where the template reaches its LARGEST magnitude (for a symmetric
        minimum, the time of that largest magnitude).  NaN when the data leave a
        gap in that minimum (see the warnings).
    primary_depth, primary_depth_err : float
        Depth of the primary minimum below the brightest point of the template
        (mag); NaN with the epoch.
    secondary_depth, secondary_depth_err : float
        The same for the second minimum (the most prominent other one); NaN when
        the template has none, when it is not significant (prominence below 3
        sigma) or when the data leave a gap in it.
    secondary_phase, secondary_phase_err : float
        Phase of the secondary's mid-point after the primary's, in [0, 1).
    ptp_amplitude, ptp_amplitude_err : float
        Peak-to-peak amplitude of the template (faintest minus brightest
        magnitude); its error is NaN when the faintest part is not covered.
    n_knots : int
        Knots of the periodic cubic spline (= its coefficients).
    knot_alpha : float
        Weight of the variation density in the knot placement (0: equally spaced).
    knots : tuple of float
        Knot phases in [0, 1) (relative to ``t_ref``).
    n_parameters : int
        ``n_knots + 1`` (the frequency).
    aic : float
        Akaike information criterion of the chosen template,
        ``N ln(chi2 / N) + 2 n_parameters``.
    chi2, dof, reduced_chi2, rms : float, int, float, float
        Generalised chi-square, degrees of freedom, chi2/dof (the factor applied to
        the covariance) and the unweighted rms of the residuals (mag).
    n_points, n_nights : int
        Measurements and nights with a shared calibration error (0 without).
    converged : bool
        Whether the Gauss-Newton iterations met their tolerance.
    method : str
        The model and the error treatment in words.
    warnings : tuple of str
    coefficients, covariance : np.ndarray
        Spline coefficients and the model covariance of ``(c_0 .. c_{K-1}, f)``
        scaled by the reduced chi-square (the reported errors may be larger).
    """

    frequency: float
    frequency_err: float
    period: float
    period_err: float
    t_ref: float
    epoch_min_light: float
    epoch_min_light_err: float
    primary_depth: float
    primary_depth_err: float
    secondary_depth: float
    secondary_depth_err: float
    secondary_phase: float
    secondary_phase_err: float
    ptp_amplitude: float
    ptp_amplitude_err: float
    n_knots: int
    knot_alpha: float
    knots: tuple[float, ...]
    n_parameters: int
    aic: float
    chi2: float
    dof: int
    reduced_chi2: float
    rms: float
    n_points: int
    n_nights: int
    converged: bool
    method: str
    warnings: tuple[str, ...]
    coefficients: np.ndarray = field(repr=False)
    covariance: np.ndarray = field(repr=False)

    def model(self, t: Any) -> np.ndarray:
        """Template magnitudes at times ``t`` (same time system as the fitted data)."""
        t = np.asarray(t, dtype=float)
        phase = np.mod(self.frequency * (t.ravel() - self.t_ref), 1.0)
        spl = _spline(np.asarray(self.knots), self.coefficients)
        return spl(phase).reshape(t.shape)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict (NaN becomes None)."""
        return {
            "method": self.method,
            "frequency": _jf(self.frequency),
            "frequency_err": _jf(self.frequency_err),
            "period": _jf(self.period),
            "period_err": _jf(self.period_err),
            "t_ref": _jf(self.t_ref),
            "epoch_min_light": _jf(self.epoch_min_light),
            "epoch_min_light_err": _jf(self.epoch_min_light_err),
            "primary_depth": _jf(self.primary_depth),
            "primary_depth_err": _jf(self.primary_depth_err),
            "secondary_depth": _jf(self.secondary_depth),
            "secondary_depth_err": _jf(self.secondary_depth_err),
            "secondary_phase": _jf(self.secondary_phase),
            "secondary_phase_err": _jf(self.secondary_phase_err),
            "ptp_amplitude": _jf(self.ptp_amplitude),
            "ptp_amplitude_err": _jf(self.ptp_amplitude_err),
            "n_knots": int(self.n_knots),
            "knot_alpha": _jf(self.knot_alpha),
            "knots": [_jf(v) for v in self.knots],
            "n_parameters": int(self.n_parameters),
            "aic": _jf(self.aic),
            "chi2": _jf(self.chi2),
            "dof": int(self.dof),
            "reduced_chi2": _jf(self.reduced_chi2),
            "rms": _jf(self.rms),
            "n_points": int(self.n_points),
            "n_nights": int(self.n_nights),
            "converged": bool(self.converged),
            "warnings": list(self.warnings),
        }


def fit_template_period(
    t: Any,
    y: Any,
    dy: Any,
    frequency: float,
    *,
    group: Any = None,
    group_err: Any = None,
) -> TemplateFit:
    """Refine the period of a strictly periodic star with a spline template of its own curve.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days, BJD_TDB), magnitudes and their 1-sigma errors.
    frequency : float
        Starting frequency (cycles/day), within about ``0.5/T`` of the truth (``T``
        the time span), e.g. a periodogram's peak.  For an eclipsing binary give
        the ORBITAL frequency (one primary and one secondary eclipse per cycle).
    group : array_like, optional
        Night label of each point (any hashable values); with ``group_err`` the
        points of a night share a calibration error.  None: independent points.
    group_err : array_like, optional
        Shared 1-sigma error of each night (one value per distinct label in sorted
        order, or one per point), see :func:`varstar.period.nightly.nightly_whitener`.

    Returns
    -------
    TemplateFit
        See the class and the module docstring for the model and the errors.

    Raises
    ------
    InputError
        Bad arrays, non-finite values, non-positive errors, a non-positive
        frequency or inconsistent night labels.
    ReductionError
        Too few points for a template and a frequency, a data span of zero, or
        phases too sparsely covered for any template.
    """
    t, y, dy = _check_series(t, y, dy, min_points=2 * _MIN_KNOTS + 2, what="template fit")
    try:
        f0 = float(frequency)
    except (TypeError, ValueError) as exc:
        raise InputError(
            f"template fit: the starting frequency must be a number (got {frequency!r})"
        ) from exc
    if not (math.isfinite(f0) and f0 > 0):
        raise InputError(f"template fit: the starting frequency must be positive (got {frequency!r})")
    span = float(t.max() - t.min())
    if not span * f0 >= 1.0:
        raise ReductionError(
            f"template fit: the data span {span:.4g} d, less than one cycle of the starting period "
            f"{1 / f0:.4g} d; a template fit needs the curve to repeat"
        )
    if np.ptp(y) == 0.0:
        raise ReductionError("template fit: the magnitudes are all equal; there is no curve to fit")

    if group is None and group_err is not None:
        raise InputError("template fit: group_err (nightly calibration errors) needs group (night labels)")
    gls = _Gls(y, dy, group, group_err)
    w = dy**-2.0
    t_ref = float(np.sum(w * t) / np.sum(w))
    tau = t - t_ref
    n = t.size

    f, knots, prof, alpha, converged, k_max, rivals = _search(gls, tau, y, w, f0, span)

    if f <= 0:
        raise ReductionError("template fit: the frequency ran to zero or below; start from a better peak")

    k = knots.size
    n_par = k + 1
    dof = n - n_par
    if dof <= 0:
        raise ReductionError(f"template fit: {n} points cannot constrain {n_par} parameters")
    chi2 = prof.chi2
    scale = chi2 / dof
    j = _freq_column(tau, f, knots, prof.coef)
    fac = _chol(_joint_normal(gls, prof, j))  # J^T C^-1 J
    if fac is None:
        raise ReductionError(
            "template fit: the normal matrix of template and frequency is singular; the "
            "sampling cannot separate the period from the shape"
        )
    m_inv = _solve(fac, np.eye(n_par))
    errors = _Errors(gls, prof.design, j, prof.resid, m_inv, scale, dof)
    cov = errors.cov
    e_f = np.zeros(n_par)
    e_f[k] = 1.0
    # the profile chi-square's own curvature, by a central difference over +-2 sigma
    h = 2.0 * math.sqrt(m_inv[k, k] * scale)
    sides = [_profile(gls, tau, f + s * h, knots) for s in (-1.0, 1.0)]
    var_curv = float("nan")
    if all(p is not None for p in sides):
        curvature = (sides[0].chi2 - 2.0 * chi2 + sides[1].chi2) / h**2
        if curvature > 0:
            var_curv = 2.0 / curvature * scale
    f_err = math.sqrt(max(errors(e_f) ** 2, var_curv if math.isfinite(var_curv) else 0.0))
    coef = prof.coef

    # extrema of the template: primary minimum = largest magnitude
    spl, x_bright, x_prim, second = _extrema(knots, coef)
    phase = np.mod(f * tau, 1.0)
    phase_sorted = np.sort(phase)
    v_bright = float(spl(x_bright))
    b_bright = _basis_at(x_bright, knots)

    def mid_phase(x: float) -> tuple[float, np.ndarray]:
        xm, gm = _bisector(spl, knots, x, x_bright, phase_sorted)
        g = np.zeros(n_par)
        g[:k] = gm
        return xm, g

    def depth(x: float) -> tuple[float, float]:
        g = np.zeros(n_par)
        g[:k] = _basis_at(x, knots) - b_bright  # envelope theorem: the extrema do not move the values
        return float(spl(x)) - v_bright, errors(g)

    nan = float("nan")
    ptp, ptp_err = depth(x_prim)
    prim_ok = _covered(spl, x_prim, v_bright, phase)
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
        g[:k] = _basis_at(x_sec, knots) - _basis_at(x_saddle, knots)
        prominence, prominence_err = float(spl(x_sec) - spl(x_saddle)), errors(g)
        sec_significant = prominence >= 3.0 * prominence_err
        if not sec_significant:
            sec_note = (
                f"no significant second minimum: the template's next minimum rises only "
                f"{prominence:.4f} +- {prominence_err:.4f} mag above the light between "
                "(secondary depth and phase are NaN)"
            )
        elif not _covered(spl, x_sec, v_bright, phase):
            sec_note = "the data leave a gap in the second minimum: its depth and phase are reported as NaN"
        else:
            sec_depth, sec_depth_err = d_sec, d_sec_err
            x_sm, g_sec = mid_phase(x_sec)
            if prim_ok and math.isfinite(x_sm):
                sec_phase = (x_sm - x_mid) % 1.0
                sec_phase_err = errors(g_sec - g_prim)

    warnings: list[str] = []
    if abs(f - f0) > 0.5 / span:
        warnings.append(
            f"the frequency moved from {f0:.6f} to {f:.6f} c/d, more than half the resolution "
            f"1/T = {1 / span:.6f} c/d: the starting peak may have been an alias"
        )
    if not converged:
        warnings.append("the Gauss-Newton iterations on the frequency did not meet their tolerance")
    close = [(d, fr) for d, fr in rivals if d < _RIVAL_AIC]
    if close:
        d, fr = min(close)
        warnings.append(
            f"another frequency, {fr:.6f} c/d, fits almost as well (AIC higher by only {d:.1f}): "
            "the cycle count between the observed minima is ambiguous, and the error does not "
            "include this; more data in other cycles would decide"
        )
    if k >= k_max:
        warnings.append(
            f"the template uses the largest knot number allowed ({k}); the curve may have "
            "structure finer than the template can follow"
        )
    if not prim_ok:
        warnings.append(
            "the data leave a gap in the deepest minimum (its ingress, bottom or egress is "
            "missing): its epoch and depth are not determined and are reported as NaN"
        )
    if sec_note:
        warnings.append(sec_note)
    seen = [_cycles_seen(spl, x_prim, v_bright, f, tau)]
    if sec_significant:
        seen.append(_cycles_seen(spl, second[0], v_bright, f, tau))
    if max(seen) < 2:
        warnings.append(
            "no minimum was observed in more than one cycle: the period is not fixed by repeated "
            "minima and its error is not reliable"
        )

    nights = gls.whiten.n_groups
    method = (
        f"periodic cubic B-spline template in phase ({k} knots, placed "
        + ("evenly" if alpha == 0 else f"by equidistribution with weight {alpha:g} on the curve's variation")
        + ", number chosen by AIC) with free frequency; generalised least squares"
        + (f" with shared calibration errors of {nights} nights" if nights else " with weights 1/dy^2")
        + "; errors from the covariance scaled by the reduced chi-square (frequency: also the "
        "profile chi-square's curvature) or the sandwich estimate, whichever is larger"
    )
    return TemplateFit(
        frequency=f,
        frequency_err=f_err,
        period=1.0 / f,
        period_err=f_err / f**2,
        t_ref=t_ref,
        epoch_min_light=float(epoch),
        epoch_min_light_err=float(epoch_err),
        primary_depth=float(prim_depth),
        primary_depth_err=float(prim_depth_err),
        secondary_depth=float(sec_depth),
        secondary_depth_err=float(sec_depth_err),
        secondary_phase=float(sec_phase),
        secondary_phase_err=float(sec_phase_err),
        ptp_amplitude=float(ptp),
        ptp_amplitude_err=float(ptp_err) if prim_ok else nan,
        n_knots=int(k),
        knot_alpha=float(alpha),
        knots=tuple(float(v) for v in knots),
        n_parameters=int(n_par),
        aic=float(_aic(chi2, n, n_par)),
        chi2=float(chi2),
        dof=int(dof),
        reduced_chi2=float(scale),
        rms=float(np.sqrt(np.mean(prof.resid**2))),
        n_points=int(n),
        n_nights=int(nights),
        converged=bool(converged),
        method=method,
        warnings=tuple(warnings),
        coefficients=coef.copy(),
        covariance=cov,
    )

"""The periodic cubic B-spline basis of the eclipse template (:mod:`varstar.period.template`).

A periodic cubic spline of the phase with ``K`` knots in one cycle has ``K``
coefficients; its basis is built on the knot vector extended by three knots on
each side (de Boor 1978, *A Practical Guide to Splines*, Springer), evaluated
with :class:`scipy.interpolate.BSpline`.
"""

from __future__ import annotations

import numpy as np
from scipy.interpolate import BSpline

__all__ = ["DEGREE", "SplineDesign", "basis_at", "periodic_spline"]

DEGREE = 3  # cubic B-splines


def _extended_knots(knots: np.ndarray) -> np.ndarray:
    """Knot vector of the periodic cubic spline with interior knots ``knots`` in [0, 1)."""
    n = knots.size
    return np.concatenate([knots[n - DEGREE :] - 1.0, knots, knots[: DEGREE + 1] + 1.0])


def _base_phase(phase: np.ndarray, knots: np.ndarray) -> np.ndarray:
    """Phases mapped into the base interval ``[knots[0], knots[0] + 1)``."""
    x = knots[0] + np.mod(phase - knots[0], 1.0)
    return np.minimum(x, np.nextafter(knots[0] + 1.0, -np.inf))


class SplineDesign:
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
        d = BSpline.design_matrix(_base_phase(phase, knots), _extended_knots(knots), DEGREE, extrapolate=True)
        n = phase.size
        self.k, self.n = k, n
        self.values = np.asarray(d.data, dtype=float).reshape(n, DEGREE + 1)
        first = np.asarray(d.indices).reshape(n, DEGREE + 1)[:, 0]
        self.cols = (first[:, None] + np.arange(DEGREE + 1)[None, :]) % k  # (N, 4)

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
        for a in range(DEGREE + 1):
            for b in range(a, DEGREE + 1):
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
        np.add.at(out, (np.repeat(np.arange(self.n), DEGREE + 1), self.cols.ravel()), self.values.ravel())
        return out



def periodic_spline(knots: np.ndarray, coef: np.ndarray) -> BSpline:
    """The periodic spline as a :class:`scipy.interpolate.BSpline` (derivatives available)."""
    return BSpline(
        _extended_knots(knots), np.concatenate([coef, coef[:DEGREE]]), DEGREE, extrapolate="periodic"
    )


def basis_at(x: float, knots: np.ndarray, nu: int = 0) -> np.ndarray:
    """Values (``nu = 0``) or ``nu``-th derivatives of the ``K`` periodic B-splines at phase ``x``."""
    # a spline whose coefficient vectors are the unit vectors evaluates every basis function at once
    basis = periodic_spline(knots, np.eye(knots.size))
    return np.asarray(basis.derivative(nu)(x) if nu else basis(x), dtype=float)


"""Nightly calibration errors in the period fits: a covariance shared by each night's points.

Every night (and band) of an archive is tied to the catalogue through its own
zero point, whose error ``cal_err`` is common to all points of that night.  Seen
over many nights, this is a random offset per night: the points of one night move
together.  Treating the points as independent makes period errors too small when
the offsets are comparable to the point errors (the demo's V band showed a period
pull of -2.6).

The model used here is the one the reduction implies: point ``i`` of night ``g``
has the covariance

.. math::

    C_g = \\mathrm{diag}(\\sigma_i^2) + c_g^2 \\, \\mathbf{1}\\mathbf{1}^T ,

independent between nights.  Generalised least squares with this covariance is
exactly a fit with one free offset per night that carries a Gaussian prior of
width ``c_g`` (the offsets marginalised analytically), and costs nothing extra:
each block is a diagonal plus a rank-one term, so a whitening matrix ``L_g`` with
``L_g^T L_g = C_g^{-1}`` has the closed form

.. math::

    L_g = (I - \\beta_g v v^T) W^{1/2}, \\qquad v = W^{1/2}\\mathbf{1},\\quad
    s_g = \\sum_{i \\in g} w_i, \\quad
    \\beta_g = \\frac{1 - (1 + c_g^2 s_g)^{-1/2}}{s_g},

(``W = diag(1/sigma_i^2)``; check: ``(I - beta v v^T)^2 = I - gamma v v^T`` with
``gamma = c^2/(1 + c^2 s)``, the Sherman-Morrison inverse of ``C_g``).  Applying it
to a residual vector or a Jacobian is two weighted sums per night.  Any least-squares
fit of ``L r`` then has the GLS solution, chi-square and covariance.  With all
``c_g = 0`` it is the ordinary weighted fit.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from varstar.errors import InputError

__all__ = ["NightlyWhitener", "nightly_whitener"]


class NightlyWhitener:
    """Applies ``L`` (see the module docstring) to vectors ``(N,)`` and matrices ``(N, P)``.

    Attributes
    ----------
    n_groups : int
        Number of nights (groups) with a non-zero shared error.
    active : bool
        False when every shared error is zero (the whitening is plain ``x / dy``).
    """

    def __init__(self, dy: np.ndarray, group: np.ndarray, group_err: np.ndarray) -> None:
        self._sw = 1.0 / dy
        w = self._sw**2
        self._group = group
        s = np.bincount(group, weights=w, minlength=group_err.size)
        c2 = group_err**2
        with np.errstate(divide="ignore", invalid="ignore"):
            beta = np.where(s > 0, (1.0 - 1.0 / np.sqrt(1.0 + c2 * s)) / s, 0.0)
        self._beta_i = beta[group]  # per point
        self._w = w
        self._s, self._c2 = s, c2
        self._indicator = None  # sparse night-by-point matrix, built on first use with a matrix
        self.n_groups = int(np.count_nonzero(c2 > 0))
        self.active = self.n_groups > 0

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """``L x`` for a vector, or ``L X`` for a matrix whose rows are the points."""
        x = np.asarray(x, dtype=float)
        if not self.active:
            return x * (self._sw if x.ndim == 1 else self._sw[:, None])
        if x.ndim == 1:
            sums = np.bincount(self._group, weights=self._w * x)
            return self._sw * (x - self._beta_i * sums[self._group])
        if self._indicator is None:
            from scipy.sparse import csr_matrix

            n = self._group.size
            self._indicator = csr_matrix((self._w, (self._group, np.arange(n))), shape=(self._c2.size, n))
        sums = self._indicator @ x  # per night: sum of w x, for every column at once
        out = sums[self._group]  # in place from here: these matrices are large (N x P)
        out *= -self._beta_i[:, None]
        out += x
        out *= self._sw[:, None]
        return out

    def without_offsets(self, resid: np.ndarray) -> np.ndarray:
        """Residuals with each night's estimated offset (:meth:`offsets`) removed."""
        return resid - self.offsets(resid)[self._group] if self.active else resid

    def offsets(self, resid: np.ndarray) -> np.ndarray:
        """Best estimate of each night's offset from the residuals (the prior-shrunk weighted mean)."""
        swr = np.bincount(self._group, weights=self._w * resid, minlength=self._c2.size)
        return self._c2 * swr / (1.0 + self._c2 * self._s)


def nightly_whitener(dy: Any, group: Any = None, group_err: Any = None) -> NightlyWhitener:
    """Build the whitening of points with errors ``dy`` and per-night shared errors.

    Parameters
    ----------
    dy : array_like
        1-sigma errors of the points (positive).
    group : array_like of int, optional
        Night (or night-and-band) index of each point, ``0 .. G-1``.  None: no
        shared errors (plain weighted least squares).
    group_err : array_like, optional
        Shared 1-sigma error of each group (``G`` values, or one value per point,
        which must then be equal within a group); NaN or 0 means none.

    Returns
    -------
    NightlyWhitener
    """
    dy = np.asarray(dy, dtype=float)
    if group is None:
        return NightlyWhitener(dy, np.zeros(dy.size, dtype=np.intp), np.zeros(1))
    group = np.asarray(group)
    if group.shape != dy.shape:
        raise InputError(f"nightly errors: {dy.size} points but {group.size} night labels")
    _, codes = np.unique(group, return_inverse=True)
    codes = codes.astype(np.intp).ravel()
    n_groups = int(codes.max()) + 1 if codes.size else 0
    ge = np.zeros(n_groups) if group_err is None else np.asarray(group_err, dtype=float)
    if ge.shape == dy.shape and ge.size != n_groups:
        per_point = np.nan_to_num(ge, nan=0.0)
        ge = np.zeros(n_groups)
        np.maximum.at(ge, codes, per_point)
    elif ge.size != n_groups:
        raise InputError(f"nightly errors: {n_groups} nights but {ge.size} shared errors")
    ge = np.nan_to_num(ge, nan=0.0)
    if np.any(ge < 0):
        raise InputError("nightly errors: a night's calibration error is negative")
    return NightlyWhitener(dy, codes, ge)

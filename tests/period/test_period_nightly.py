"""The nightly-error whitening against dense generalised least squares.

Outside reference: the GLS estimator (X^T C^-1 X)^-1 X^T C^-1 y with the dense
covariance C = diag(dy^2) + sum_g c_g^2 1_g 1_g^T, inverted by numpy (textbook
linear algebra), and the equivalence of GLS with a per-night offset carrying a
Gaussian prior of width c_g (checked by fitting the augmented model directly).
"""

from __future__ import annotations

import numpy as np
import pytest

from varstar.errors import InputError
from varstar.period.nightly import nightly_whitener


def _case(seed=1, n=60, groups=5):
    rng = np.random.default_rng(seed)
    g = np.sort(rng.integers(0, groups, n))
    dy = rng.uniform(0.01, 0.04, n)
    c = rng.uniform(0.0, 0.03, groups)
    c[1] = 0.0  # one night without a shared error
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.normal(size=n)])
    y = X @ [1.0, 0.5, -0.2] + rng.normal(0, dy) + rng.normal(0, np.maximum(c, 1e-12))[g]
    return g, dy, c, X, y


def test_whitening_inverts_the_dense_covariance():
    g, dy, c, X, y = _case()
    C = np.diag(dy**2) + (c[g][:, None] * c[g][None, :]) * (g[:, None] == g[None, :])
    L = nightly_whitener(dy, g, c)
    LX = L(X)
    # L^T L = C^-1  (Sherman-Morrison), checked column by column through X^T C^-1 X
    np.testing.assert_allclose(LX.T @ LX, X.T @ np.linalg.solve(C, X), rtol=1e-10)
    np.testing.assert_allclose(LX.T @ L(y), X.T @ np.linalg.solve(C, y), rtol=1e-10)


def test_gls_equals_a_fit_with_per_night_offsets_and_their_prior():
    g, dy, c, X, y = _case(seed=2)
    L = nightly_whitener(dy, g, c)
    beta_gls, *_ = np.linalg.lstsq(L(X), L(y), rcond=None)
    # augmented: one offset per night with a prior row o_g / c_g (nights with c_g = 0 get no offset)
    G = c.size
    keep = c > 0
    A = np.zeros((y.size + keep.sum(), X.shape[1] + keep.sum()))
    A[: y.size, : X.shape[1]] = X / dy[:, None]
    cols = np.flatnonzero(keep)
    for j, gg in enumerate(cols):
        A[: y.size, X.shape[1] + j] = (g == gg) / dy
        A[y.size + j, X.shape[1] + j] = 1.0 / c[gg]
    b = np.concatenate([y / dy, np.zeros(keep.sum())])
    sol, *_ = np.linalg.lstsq(A, b, rcond=None)
    np.testing.assert_allclose(beta_gls, sol[: X.shape[1]], rtol=1e-9, atol=1e-12)
    # offsets: the prior-shrunk estimate equals the augmented fit's
    off = L.offsets(y - X @ beta_gls)
    np.testing.assert_allclose(off[cols], sol[X.shape[1]:], rtol=1e-8, atol=1e-12)
    assert G == off.size


def test_no_shared_error_is_plain_weighting():
    g, dy, c, X, y = _case(seed=3)
    L = nightly_whitener(dy, g, np.zeros_like(c))
    assert not L.active
    np.testing.assert_allclose(L(X), X / dy[:, None])
    L0 = nightly_whitener(dy)
    np.testing.assert_allclose(L0(y), y / dy)


def test_per_point_errors_and_bad_input():
    g, dy, c, X, y = _case(seed=4)
    L1 = nightly_whitener(dy, g, c[g])
    L2 = nightly_whitener(dy, g, c)
    np.testing.assert_allclose(L1(y), L2(y))
    with pytest.raises(InputError, match="night labels"):
        nightly_whitener(dy, g[:-1], c)
    with pytest.raises(InputError, match="negative"):
        nightly_whitener(dy, g, -c - 0.1)


def test_alias_choice_by_schur_complement_equals_refitting_everything():
    """prewhiten._best_alias ranks trial frequencies by the chi-square drop of the new columns
    alone (Schur complement); refitting the whole model at each trial must rank them the same
    (block least squares, common linear algebra), also with nightly covariances."""
    from varstar.period.prewhiten import _best_alias
    from varstar.period.sinusoids import fit_sinusoids as _fit_sinusoids

    rng = np.random.default_rng(12)
    t = np.sort(np.concatenate([n + rng.uniform(0.0, 0.3, 40) for n in range(25)]))
    f1, f2 = 1.7449, 2.413
    y = 0.2 * np.cos(2 * np.pi * f1 * t) + 0.05 * np.cos(2 * np.pi * f2 * t + 1.0) + rng.normal(0, 0.01, t.size)
    dy = np.full(t.size, 0.01)
    night = np.floor(t).astype(int)
    y = y + rng.normal(0, 0.01, 25)[night]
    whiten = nightly_whitener(dy, night, np.full(25, 0.01))
    t_ref = float(t.mean())
    for base in (2.413, 2.2):  # the true second frequency among its aliases, and a grid with no truth
        trials = base + np.array([0.0, -1.0, 1.0, -2.0, 2.0]) * 1.0027
        trials = trials[trials > 0]
        chi2 = [_fit_sinusoids(t, y, dy, [f1, f], (2, 1), t_ref, refine=False, whiten=whiten).chi2 for f in trials]
        assert _best_alias(t - t_ref, y, whiten, np.array([f1]), (2,), 1, trials) == trials[int(np.argmin(chi2))]

"""Time of an extremum from a symmetric polynomial in ``(t - t0)**2`` (pure core).

:func:`symmetric_fit` fits ``c_0 + c_1 u^2 + c_2 u^4 + ...`` (u = t - t0) by
weighted least squares, chooses the number of terms by the Bayesian
information criterion and takes its error from a residual bootstrap.  It is the
``"symmetric-polynomial"`` entry of
:data:`varstar.timings.estimators.ESTIMATORS`, and the independent second
estimate beside Kwee & van Woerden in
:func:`varstar.timings.search.find_timings`.  Like Kwee & van Woerden it
assumes a symmetric extremum.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError, ReductionError
from ..results import Result, sd
from .checks import series

__all__ = ["SYMMETRIC_POLYNOMIAL", "SymmetricFit", "symmetric_fit"]

#: The method's name in results, in the archive's ``method`` column and in the estimator table.
SYMMETRIC_POLYNOMIAL = "symmetric-polynomial"


@dataclass(frozen=True)
class SymmetricFit(Result):
    """Time of an extremum from a symmetric polynomial fit.

    Model ``m(t) = sum_k c_k (t - t0)^(2k)``, k = 0..n_terms-1.

    Attributes
    ----------
    time, err
        t0 and its bootstrap standard error (days).
    formal_err
        Error from the fit's covariance (scaled by chi2/dof when above 1), for
        comparison.
    n_terms
        Number of even terms, chosen by the Bayesian information criterion.
    coefficients
        ``c_k`` in mag / day^(2k).
    chi2, dof
        Of the best fit.
    n_boot, n_boot_used
        Bootstrap resamples asked for and converged.
    n_points
        Observations used.
    """

    time: float
    err: float
    formal_err: float
    n_terms: int
    coefficients: tuple[float, ...]
    chi2: float
    dof: int
    n_boot: int
    n_boot_used: int
    n_points: int
    method: str = SYMMETRIC_POLYNOMIAL


def _sym_model(p: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Model and Jacobian of ``sum_k c_k (v - x0)^(2k)``; p = [x0, c_0, ...], batched over p's leading axes."""
    x0 = p[..., 0, None]
    coef = p[..., 1:]
    u = v - x0
    u2 = u * u
    nt = coef.shape[-1]
    powers = np.stack([u2**k for k in range(nt)], axis=-1)  # (..., n, nt)
    model = np.einsum("...nk,...k->...n", powers, coef)
    dpow = np.stack([np.zeros_like(u)] + [2.0 * k * u * u2 ** (k - 1) for k in range(1, nt)], axis=-1)
    dx0 = -np.einsum("...nk,...k->...n", dpow, coef)
    return model, np.concatenate([dx0[..., None], powers], axis=-1)


def _sym_start(v: np.ndarray, y: np.ndarray, w: np.ndarray, nt: int, extra: float | None) -> np.ndarray:
    """Best start by scanning x0 over the middle 60% of the data (linear in the c_k at fixed x0)."""
    lo, hi = v.min(), v.max()
    xs = np.linspace(lo + 0.2 * (hi - lo), hi - 0.2 * (hi - lo), 61)
    if extra is not None:
        xs = np.append(xs, extra)
    u2 = (v[None, :] - xs[:, None]) ** 2
    a = np.stack([u2**k for k in range(nt)], axis=-1) * w[None, :, None]
    q, r = np.linalg.qr(a)
    coef = np.linalg.solve(r, np.einsum("xnk,n->xk", q, y * w)[..., None])[..., 0]
    chi2 = np.sum((np.einsum("xnk,xk->xn", a, coef) - y * w) ** 2, axis=1)
    i = int(np.argmin(chi2))
    return np.concatenate([[xs[i]], coef[i]])


def _refit_resamples(p: np.ndarray, v: np.ndarray, w: np.ndarray, y_b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Gauss-Newton refits of many resamples at once, started from the best fit ``p``.

    Returns the fitted centres (scaled units) and which resamples converged
    with their centre inside the data.
    """
    pb = np.tile(p, (y_b.shape[0], 1))
    ok = np.ones(y_b.shape[0], dtype=bool)
    step = np.zeros_like(pb)
    for _ in range(60):
        mb, jb = _sym_model(pb, v)
        jb = jb * w[None, :, None]
        r = (y_b - mb) * w[None, :]
        with np.errstate(all="ignore"):
            q, rr = np.linalg.qr(jb)
            step = np.linalg.solve(rr, np.einsum("bnk,bn->bk", q, r)[..., None])[..., 0]
        bad = ~np.all(np.isfinite(step), axis=1)
        step[bad] = 0.0
        ok &= ~bad
        pb += step
        if np.max(np.abs(step[ok, 0]), initial=0.0) < 1e-10:
            break
    ok &= np.abs(step[:, 0]) < 1e-8
    ok &= (pb[:, 0] >= v.min()) & (pb[:, 0] <= v.max())
    return pb[:, 0], ok


def _best_fit(
    v: np.ndarray, y: np.ndarray, w: np.ndarray, max_terms: int, guess: float | None
) -> tuple[int, np.ndarray, float]:
    """Levenberg-Marquardt fits with 3 to ``max_terms`` even terms; the one of least BIC.

    Returns ``(n_terms, parameters [x0, c_0, ...], chi2)`` in the scaled time
    ``v``.  Only fits whose centre lies inside the data compete.
    """
    from scipy.optimize import least_squares

    n = v.size
    best = None
    for nt in range(3, max_terms + 1):
        if n < nt + 3:
            break
        p0 = _sym_start(v, y, w, nt, guess)
        res = least_squares(
            lambda p: (_sym_model(p, v)[0] - y) * w,
            p0,
            jac=lambda p: _sym_model(p, v)[1] * w[:, None],
            method="lm",
        )
        chi2 = float(2.0 * res.cost)
        bic = chi2 + (nt + 1) * math.log(n)
        if v.min() <= res.x[0] <= v.max() and (best is None or bic < best[0]):
            best = (bic, nt, res.x, chi2)
    if best is None:
        raise ReductionError("symmetric fit: no fit with its centre inside the data")
    _, nt, p, chi2 = best
    return nt, p, chi2


def _bootstrap_centres(
    p: np.ndarray, v: np.ndarray, y: np.ndarray, dy: np.ndarray, model: np.ndarray, dof: int,
    *, rng: np.random.Generator, n_boot: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Residual bootstrap of the best fit ``p``: each resample's centre, and which converged.

    The standardised residuals, centred and inflated by ``sqrt(N / dof)``, are
    resampled with replacement onto the best model (see :func:`symmetric_fit`).
    """
    n = v.size
    w = 1.0 / dy
    z = (y - model) * w
    z = (z - z.mean()) * math.sqrt(n / dof)
    idx = rng.integers(0, n, size=(n_boot, n))
    # Resamples are refitted in batches so that memory stays at a few MB for long nights.
    batch = max(8, 40_000 // n)
    x0_boot, ok = np.empty(n_boot), np.empty(n_boot, dtype=bool)
    for start in range(0, n_boot, batch):
        sl = slice(start, min(start + batch, n_boot))
        x0_boot[sl], ok[sl] = _refit_resamples(p, v, w, model + dy * z[idx[sl]])
    return x0_boot, ok


def symmetric_fit(
    t: Any,
    mag: Any,
    mag_err: Any,
    *,
    rng: np.random.Generator,
    n_boot: int = 200,
    t0_guess: float | None = None,
    max_terms: int = 6,
) -> SymmetricFit:
    """Time of an extremum from a polynomial in ``(t - t0)^2``, with a bootstrap error.

    The model ``c_0 + c_1 u^2 + c_2 u^4 + ...`` (u = t - t0) is symmetric about
    t0 and non-linear only in t0.  It is fitted by weighted least squares
    (:func:`scipy.optimize.least_squares`, Levenberg-Marquardt) for 3 to
    ``max_terms`` even terms, and the number of terms with the smallest
    Bayesian information criterion ``chi2 + (n_terms + 1) ln N`` is kept (a
    quartic suffices near the bottom of a minimum; flat shoulders of an eclipse
    need more).  Works for minima and maxima alike.

    Error: residual bootstrap.  The standardised residuals ``(y - model)/err``,
    centred and inflated by ``sqrt(N / (N - p))`` for the fitted parameters,
    are resampled with replacement onto the best model, and each resample is
    refitted (same number of terms).  Model misfit is resampled as if it were
    noise, which makes the error conservative rather than optimistic.  The
    resamples are refitted by a Gauss-Newton iteration vectorised over all
    resamples, started from the best fit (written here because one
    ``least_squares`` call per resample would cost ~20x more); resamples that
    do not converge, or whose t0 leaves the data, are dropped and counted.

    Parameters
    ----------
    t, mag, mag_err
        One extremum (days, mag, mag).
    rng
        Random generator for the bootstrap.
    n_boot
        Number of resamples (>= 20).
    t0_guess
        Optional starting time (e.g. from :func:`kwee_van_woerden`), added to
        the scan of starting values.
    max_terms
        Largest number of even terms tried (3..8).
    """
    if not isinstance(rng, np.random.Generator):
        raise InputError("symmetric_fit: rng must be a numpy.random.Generator (e.g. numpy.random.default_rng(seed))")
    if n_boot < 20:
        raise InputError(f"symmetric_fit: n_boot must be at least 20, got {n_boot}")
    if not 3 <= max_terms <= 8:
        raise InputError(f"symmetric_fit: max_terms must be between 3 and 8, got {max_terms}")
    if mag_err is None:
        raise InputError("symmetric fit: magnitude errors are needed (they weight the fit)")
    t, y, dy = series(t, mag, mag_err, what="symmetric fit", min_points=7)
    n = t.size
    t_ref = 0.5 * (t[0] + t[-1])
    scale = 0.5 * (t[-1] - t[0])
    if not scale > 0:
        raise InputError("symmetric fit: all times are equal")
    v = (t - t_ref) / scale
    w = 1.0 / dy
    guess = None if t0_guess is None else (float(t0_guess) - t_ref) / scale
    nt, p, chi2 = _best_fit(v, y, w, max_terms, guess)
    model, jac = _sym_model(p, v)
    npar = nt + 1
    dof = n - npar
    # Direction of the extremum: the model's centre must be more extreme than its ends.
    centre = _sym_model(p, np.array([p[0]]))[0][0]
    ends = model[[0, -1]]
    if not (np.all(centre > ends) or np.all(centre < ends)):
        raise ReductionError("symmetric fit: the fitted curve has no extremum inside the data")
    jw = jac * w[:, None]
    try:
        cov = np.linalg.inv(jw.T @ jw) * max(1.0, chi2 / dof)
        formal = sd(cov[0, 0]) * scale
    except np.linalg.LinAlgError:
        formal = math.nan
    x0_boot, ok = _bootstrap_centres(p, v, y, dy, model, dof, rng=rng, n_boot=n_boot)
    used = int(ok.sum())
    if used < max(10, n_boot // 2):
        raise ReductionError(
            f"symmetric fit: only {used} of {n_boot} bootstrap resamples converged; the extremum is poorly defined"
        )
    err = float(np.std(x0_boot[ok], ddof=1) * scale)
    coef = tuple(float(c / scale ** (2 * k)) for k, c in enumerate(p[1:]))
    return SymmetricFit(
        time=float(t_ref + p[0] * scale),
        err=err,
        formal_err=float(formal),
        n_terms=int(nt),
        coefficients=coef,
        chi2=chi2,
        dof=int(dof),
        n_boot=int(n_boot),
        n_boot_used=used,
        n_points=int(n),
    )

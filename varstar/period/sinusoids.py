"""The multi-frequency sinusoid model and its weighted least-squares fit.

The model of ``F`` frequencies, frequency ``i`` with ``K_i`` harmonics, is

.. math::

    y(t) = m + \\sum_{i=1}^{F} \\sum_{k=1}^{K_i} a_{ik} \\cos(2\\pi k f_i \\tau) + b_{ik} \\sin(2\\pi k f_i \\tau),
    \\qquad \\tau = t - t_{ref},

with parameter vector ``[m, f_1, a_11, b_11, ..., a_1K, b_1K, f_2, a_21, ...]``.
:func:`fit_sinusoids` fits it by weighted (or, with a nightly whitener,
generalised) least squares: the mean and amplitudes exactly at each step, the
frequencies by Gauss-Newton steps of variable projection (see
:func:`_variable_projection`).  The covariance is always scaled by the reduced
chi-square, as described in :mod:`varstar.period.refine`, whose harmonic fit of one
signal (:func:`varstar.period.refine.fit_harmonics`) and the prewhitening of several
(:mod:`varstar.period.prewhiten`) both use this core.

Phase convention of :func:`amplitude_phase`::

    a cos x + b sin x = A cos(x + phi),   A = hypot(a, b),   phi = atan2(-b, a)  in [0, 2 pi).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.errors import InputError, ReductionError
from varstar.period.nightly import NightlyWhitener, nightly_whitener

TWO_PI = 2.0 * math.pi

__all__ = [
    "TWO_PI",
    "SinusoidFit",
    "amplitude_phase",
    "design_matrix",
    "fit_sinusoids",
    "frequency_columns",
    "frequency_index",
    "harmonic_counts",
    "model_jacobian",
    "parameter_count",
    "solve_linear",
]


# --------------------------------------------------------------------------- model


def harmonic_counts(n_freq: int, nterms: Any) -> tuple[int, ...]:
    """Harmonics of each frequency: one int for all, or one per frequency."""
    if np.ndim(nterms) == 0:
        return (int(nterms),) * n_freq
    terms = tuple(int(k) for k in nterms)
    if len(terms) != n_freq:
        raise InputError(f"harmonic fit: {n_freq} frequencies but {len(terms)} harmonic counts")
    return terms


def frequency_index(terms: tuple[int, ...]) -> np.ndarray:
    """Index of each frequency in the parameter vector (its harmonics follow it); none without frequencies."""
    if not len(terms):
        return np.zeros(0, dtype=int)
    widths = 1 + 2 * np.asarray(terms, dtype=int)
    return 1 + np.concatenate(([0], np.cumsum(widths)[:-1])).astype(int)


def parameter_count(n_freq: int, nterms: Any) -> int:
    """Length of the parameter vector: the mean, and per frequency itself and two amplitudes a harmonic."""
    return 1 + sum(1 + 2 * k for k in harmonic_counts(n_freq, nterms))


def model_jacobian(
    p: np.ndarray, tau: np.ndarray, n_freq: int, nterms: Any, want_jac: bool = True
) -> tuple[np.ndarray, np.ndarray | None]:
    """Model values and Jacobian (N x P) of the multi-frequency harmonic model.

    Parameter layout: ``[m, f_1, a_11, b_11, ..., a_1K, b_1K, f_2, a_21, ...]``;
    ``nterms`` is one harmonic count for every frequency or one per frequency.
    The loop runs over frequencies (a handful), never over measurements.
    """
    terms = harmonic_counts(n_freq, nterms)
    fidx = frequency_index(terms)
    lin = np.ones(p.size, dtype=bool)
    lin[fidx] = False
    x = design_matrix(tau, p[fidx], terms)
    model = x @ p[lin]
    if not want_jac:
        return model, None
    jac = np.empty((tau.size, p.size))
    jac[:, lin] = x
    jac[:, fidx] = frequency_columns(x, p[lin], tau, terms)
    return model, jac


def frequency_columns(x: np.ndarray, beta: np.ndarray, tau: np.ndarray, terms: tuple[int, ...]) -> np.ndarray:
    """d model / d f_i = 2 pi tau sum_k k (b_k cos kx - a_k sin kx), one column per frequency.

    ``x`` is :func:`design_matrix`'s matrix and ``beta`` the linear parameters in its order.
    """
    d = np.empty((tau.size, len(terms)))
    col = 1
    for i, nt in enumerate(terms):
        k = np.arange(1, nt + 1, dtype=float)
        ab = beta[col : col + 2 * nt]
        d[:, i] = x[:, col : col + 2 * nt : 2] @ (k * ab[1::2]) - x[:, col + 1 : col + 2 * nt : 2] @ (k * ab[0::2])
        col += 2 * nt
    return (TWO_PI * tau)[:, None] * d


@dataclass(frozen=True, eq=False)
class SinusoidFit:
    """What :func:`fit_sinusoids` returns.

    Attributes
    ----------
    params, covariance : np.ndarray
        Parameter vector (layout in the module docstring) and its covariance,
        scaled by the reduced chi-square; rows and columns of fixed frequencies are 0.
    chi2 : float
        Generalised chi-square ``|L r|^2`` (``L`` the whitener).
    dof : int
        Points less free parameters.
    resid : np.ndarray
        Data less model (not whitened).
    converged : bool
        Whether the frequency iterations reported convergence.
    message : str
        The solver's account in words.
    """

    params: np.ndarray
    covariance: np.ndarray
    chi2: float
    dof: int
    resid: np.ndarray
    converged: bool
    message: str


#: Eigenvalue ratio of the column-scaled normal matrix below which a design counts as
#: rank deficient: singular values below 1e-7 of the largest, amplitudes that lose
#: seven digits to the sampling have no meaning (common practice for a numerical rank).
_RCOND = 1e-14


def design_matrix(tau: np.ndarray, freqs: np.ndarray, terms: tuple[int, ...]) -> np.ndarray:
    """The linear columns of the model, ``[1, cos x, sin x, ..., cos Kx, sin Kx]`` per frequency
    (``x = 2 pi f tau``), in the order of the linear parameters."""
    out = np.empty((tau.size, 1 + 2 * sum(terms)))
    out[:, 0] = 1.0
    col = 1
    for f, nt in zip(freqs, terms):
        # e^{i k x} as powers of e^{i x}: one complex exponential per point instead of
        # K cosines and K sines (the harmonics' rounding error grows only as k eps)
        z = np.cumprod(np.broadcast_to(np.exp(1j * (TWO_PI * f * tau))[:, None], (tau.size, nt)), axis=1)
        out[:, col : col + 2 * nt : 2] = z.real
        out[:, col + 1 : col + 2 * nt : 2] = z.imag
        col += 2 * nt
    return out


def solve_linear(
    a_mat: np.ndarray, wy: np.ndarray, n_freq: int, terms: tuple[int, ...]
) -> tuple[np.ndarray, np.ndarray]:
    """Normal matrix and solution of the whitened linear least squares ``a_mat beta = wy``.

    Refuses a rank-deficient design (the sampling does not separate the harmonics):
    the smallest eigenvalue of the column-scaled normal matrix below ``_RCOND`` of the
    largest, i.e. singular values below its square root.
    """
    gram = a_mat.T @ a_mat
    scale = 1.0 / np.sqrt(np.maximum(np.diag(gram), 1e-300))
    ev = np.linalg.eigvalsh(gram * np.outer(scale, scale))
    if not ev[0] > _RCOND * ev[-1]:
        raise ReductionError(
            f"harmonic fit: the sampling cannot separate {a_mat.shape[1] - 1} sine and cosine terms "
            f"({n_freq} frequenc{'y' if n_freq == 1 else 'ies'}, {max(terms)} harmonics at most): "
            "too few phases covered; use fewer harmonics or more data"
        )
    return gram, np.linalg.solve(gram, a_mat.T @ wy)


def _linear_start(y, tau, freqs, nterms, whiten: NightlyWhitener) -> np.ndarray:
    """Amplitudes and mean by (generalised) linear least squares at fixed frequencies."""
    n_freq = len(freqs)
    terms = harmonic_counts(n_freq, nterms)
    p = np.zeros(parameter_count(n_freq, nterms))
    fidx = frequency_index(terms)
    p[fidx] = freqs
    lin = np.ones(p.size, dtype=bool)
    lin[fidx] = False
    _, p[lin] = solve_linear(whiten(design_matrix(tau, np.asarray(freqs, dtype=float), terms)), whiten(y), n_freq, terms)
    return p


def _variable_projection(y, tau, p, n_freq, nterms, whiten) -> tuple[np.ndarray, bool, str]:
    """Least squares over the frequencies only, the amplitudes solved exactly at each step.

    The model is linear in the mean and amplitudes and non-linear only in the few
    frequencies: variable projection (Golub & Pereyra 1973) minimises the residual of
    the linear solution as a function of the frequencies.  Each step is Gauss-Newton
    with Kaufman's (1975) Jacobian ``J = -(I - P) L dmodel/df`` (``P`` the projection on
    the whitened linear columns), written with normal matrices: with ``A = L X`` and
    ``D = L dmodel/df``, ``J^T J = D^T D - D^T A (A^T A)^-1 A^T D`` and ``J^T r = -D^T r``
    (``r`` is orthogonal to ``A``).  One pass over the points per step (matrix products,
    no factorisation of an N-row matrix), and a step is halved while it does not lower
    chi-square.  Written here rather than with scipy's least_squares because its
    Levenberg-Marquardt needs the N x F Jacobian through a QR of the N x P columns at
    every evaluation, several times the cost (``benchmarks/bench_period.py``).
    """
    terms = harmonic_counts(n_freq, nterms)
    fidx = frequency_index(terms)
    lin = np.ones(p.size, dtype=bool)
    lin[fidx] = False
    wy = whiten(y)

    def state(fr):
        q = p.copy()
        q[fidx] = fr
        x = design_matrix(tau, fr, terms)
        a_mat = whiten(x)
        gram, beta = solve_linear(a_mat, wy, n_freq, terms)
        q[lin] = beta
        r = wy - a_mat @ beta
        return q, r, float(r @ r), a_mat, gram, whiten(frequency_columns(x, beta, tau, terms))

    fr = p[fidx].copy()
    q, r, chi2, a_mat, gram, d = state(fr)
    for iteration in range(50):
        ad = a_mat.T @ d
        jtj = d.T @ d - ad.T @ np.linalg.solve(gram, ad)
        try:
            step = np.linalg.solve(jtj, d.T @ r)
        except np.linalg.LinAlgError:
            return q, False, "the frequencies are not constrained (singular normal matrix)"
        # stop when the step is far below the frequencies' own errors
        sigma = np.sqrt(np.abs(np.diag(np.linalg.inv(jtj))) * max(chi2, 1e-300) / max(tau.size - p.size, 1))
        for _ in range(30):
            new = state(fr + step)
            if new[2] <= chi2:
                break
            step = 0.5 * step
        else:
            return q, True, f"converged (no step lowers chi-square; {iteration} steps)"
        fr = fr + step
        q, r, chi2_new, a_mat, gram, d = new
        small = np.all(np.abs(step) <= 1e-6 * sigma)
        chi2, settled = chi2_new, (chi2 - chi2_new) <= 1e-12 * chi2
        if small or settled:
            return q, True, f"converged in {iteration + 1} Gauss-Newton steps"
    return q, False, "no convergence in 50 Gauss-Newton steps"


def fit_sinusoids(
    t: np.ndarray,
    y: np.ndarray,
    dy: np.ndarray,
    freqs: Any,
    nterms: Any,
    t_ref: float,
    *,
    refine: bool = True,
    p0: np.ndarray | None = None,
    whiten: NightlyWhitener | None = None,
) -> SinusoidFit:
    """Weighted (non-)linear least squares of the multi-frequency harmonic model.

    ``t, y, dy`` are checked arrays (times, magnitudes, errors), ``freqs`` the
    starting frequencies (cycles/day), ``nterms`` one harmonic count or one per
    frequency, ``t_ref`` the time origin of the phases and ``p0`` an optional full
    starting parameter vector.  The covariance is always scaled by chi2/dof (see
    :mod:`varstar.period.refine`).  With
    ``refine=False`` the frequencies are held fixed and their rows/columns of the
    covariance are zero.  ``whiten`` (from :func:`.nightly.nightly_whitener`) adds
    each night's shared calibration error to the covariance of the points; by
    default the points are independent with errors ``dy``.
    """
    freqs = np.atleast_1d(np.asarray(freqs, dtype=float))
    n_freq = freqs.size
    if whiten is None:
        whiten = nightly_whitener(dy)
    tau = t - t_ref
    n_par = parameter_count(n_freq, nterms)
    if t.size <= n_par - (0 if refine else n_freq):
        raise ReductionError(
            f"harmonic fit: {t.size} points cannot constrain {n_par} parameters "
            f"({n_freq} frequencies x {nterms} harmonics); use fewer harmonics or more data"
        )
    p = _linear_start(y, tau, freqs, nterms, whiten) if p0 is None else np.array(p0, dtype=float)
    success, message = True, "linear fit at fixed frequency"
    fidx = frequency_index(harmonic_counts(n_freq, nterms))
    if refine:
        try:
            p, success, message = _variable_projection(y, tau, p, n_freq, nterms, whiten)
        except np.linalg.LinAlgError as exc:  # the frequency ran where the harmonics coincide
            raise ReductionError(
                "harmonic fit: the normal matrix became singular while refining the frequency; the sampling "
                "cannot separate these frequencies/harmonics (too few phases covered?)"
            ) from exc
    model, jm = model_jacobian(p, tau, n_freq, nterms)
    resid = y - model
    chi2 = float(np.sum(whiten(resid) ** 2))
    free = np.ones(n_par, dtype=bool)
    if not refine:
        free[fidx] = False
    dof = int(t.size - free.sum())
    jw = whiten(jm[:, free])
    fisher = jw.T @ jw
    try:
        cov_free = np.linalg.inv(fisher)
    except np.linalg.LinAlgError as exc:  # degenerate sampling
        raise ReductionError(
            "harmonic fit: the normal matrix is singular; the sampling cannot separate "
            "these frequencies/harmonics (too few phases covered?)"
        ) from exc
    scale = chi2 / dof if dof > 0 else float("nan")
    cov = np.zeros((n_par, n_par))
    cov[np.ix_(free, free)] = cov_free * scale
    return SinusoidFit(params=p, covariance=cov, chi2=chi2, dof=dof, resid=resid, converged=success, message=message)


# --------------------------------------------------------------------------- amplitude and phase


def amplitude_phase(a: float, b: float) -> tuple[float, float, np.ndarray, np.ndarray]:
    """A, phi (cosine convention) and their gradients w.r.t. (a, b)."""
    amp = math.hypot(a, b)
    phi = math.atan2(-b, a) % TWO_PI
    if amp == 0.0:
        return amp, phi, np.array([np.nan, np.nan]), np.array([np.nan, np.nan])
    g_amp = np.array([a / amp, b / amp])
    g_phi = np.array([b / amp**2, -a / amp**2])
    return amp, phi, g_amp, g_phi


def model_at(params: np.ndarray, t_ref: float, n_freq: int, nterms: Any, t: Any) -> np.ndarray:
    """A fitted model's magnitudes at times ``t`` (any shape; the fit's time system)."""
    tau = np.asarray(t, dtype=float) - t_ref
    mod, _ = model_jacobian(params, tau.ravel(), n_freq, nterms, want_jac=False)
    return mod.reshape(tau.shape)

"""Iterative prewhitening of multiperiodic light curves.

Each round takes the highest peak of a periodogram of the residuals, fits ALL
frequencies found so far together with it (weighted non-linear least squares:
every frequency free, each with its own amplitude and phase per harmonic, one
common mean), subtracts that model from the data and starts again.  A candidate is
accepted while its amplitude signal-to-noise ratio is at least ``snr_limit``
(4, Breger et al. 1993, A&A 271, 482).

Amplitude and noise.  The candidate's amplitude is the semi-amplitude ``A`` of its
first harmonic from the simultaneous fit (not converted from periodogram power).
The noise is the mean of the residuals' amplitude spectrum, computed directly by a
weighted discrete Fourier transform

.. math::

    A(\\nu) = \\frac{2 \\left| \\sum_j w_j (r_j - \\bar r) e^{-2\\pi i \\nu t_j} \\right|}{\\sum_j w_j},
    \\qquad w_j = 1/dy_j^2,

on a grid of step ``1/(10 T)`` over a window ``noise_window`` c/d wide centred on
the candidate, with the residuals taken after fitting the candidate too.  A
sinusoid of semi-amplitude ``A`` gives ``A(nu) ~ A`` at its frequency, so signal
and noise are on the same scale.  For white noise of rms ``sigma`` and equal
weights the mean of ``A(nu)`` is ``sigma sqrt(pi / N)`` (a Rayleigh variable).

False alarms: the noise is measured after the candidate is fitted, as in the
published recipe, which lowers it by several per cent around the candidate.  On
simulated white noise with single-site nightly sampling (about 700 independent
frequencies searched, 1240 points) 4% of the data sets gave a spurious peak with
S/N >= 4 (measured while writing the tests; 300 data sets).  Wider frequency
ranges give more.

Frequencies closer than ``1.5/T`` (the resolution with a margin) to one already
found are not separated: prewhitening stops there and says so.  Errors come from
the final simultaneous fit, its covariance scaled by chi2/dof as in
:mod:`varstar.period.refine`; phases follow that module's cosine convention.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from varstar.errors import InputError, ReductionError
from varstar.results import Result, sd
from varstar.period import gls
from varstar.period._common import check_freq, check_series, propagated_err
from varstar.period.nightly import nightly_whitener
from varstar.period.sinusoids import (
    amplitude_phase,
    design_matrix,
    fit_sinusoids,
    frequency_index,
    model_jacobian,
    solve_linear,
)

__all__ = ["amplitude_spectrum", "FoundFrequency", "PrewhiteningResult", "prewhiten"]

def amplitude_spectrum(t: Any, y: Any, dy: Any, freq: Any) -> np.ndarray:
    """Weighted DFT amplitude spectrum (semi-amplitude scale; see the module docstring).

    Parameters
    ----------
    t, y, dy : array_like
        Times (days), magnitudes (or residuals) and errors (``None``: equal weights).
    freq : array_like
        Frequencies (cycles/day).
    """
    t, y, dy = check_series(t, y, dy, min_points=2, what="amplitude spectrum")
    freq = check_freq(freq)
    # gls.weighted_dft picks a non-uniform FFT on long uniform grids (ten-year series).
    return 2.0 * np.abs(gls.weighted_dft(t, y, dy, freq)) / np.sum(1.0 / dy**2)


#: The mean noise amplitude is estimated from at most this many frequencies of the window:
#: a mean over hundreds of values is precise to a few per cent, and a direct transform at
#: every grid step of a ten-year series would cost seconds (measured by the benchmark).
_NOISE_SAMPLES = 400


def _noise(t, r, dy, f0, window, step) -> float:
    hi = f0 + 0.5 * window
    step = max(step, (hi - max(f0 - 0.5 * window, 0.0)) / _NOISE_SAMPLES)
    lo = max(f0 - 0.5 * window, step)  # frequency 0 is the mean, not noise
    grid = np.arange(lo, hi + 0.5 * step, step)
    return float(np.mean(amplitude_spectrum(t, r, dy, grid)))


@dataclass(frozen=True)
class FoundFrequency(Result):
    """One frequency of a prewhitening solution (errors are 1 sigma).

    ``amplitude``/``phase`` belong to the first harmonic in the convention
    ``A cos(2 pi f (t - t_ref) + phase)``; ``harmonic_amplitudes`` lists all
    ``nterms`` of them.  ``snr`` is amplitude / ``noise`` (mean residual amplitude
    spectrum around the frequency).  ``relation`` names a harmonic or combination
    of earlier frequencies (``"2 f1"``, ``"f1 + f2"``, ``"f2 - f1"``) or is empty.
    """

    label: str
    frequency: float
    frequency_err: float
    period: float
    period_err: float
    amplitude: float
    amplitude_err: float
    phase: float
    phase_err: float
    snr: float
    noise: float
    harmonic_amplitudes: tuple[float, ...]
    relation: str


@dataclass(frozen=True, eq=False)
class PrewhiteningResult(Result):
    """Frequencies found by prewhitening, their errors, and why the search stopped.

    Attributes
    ----------
    frequencies : tuple of FoundFrequency
        In the order found.
    mean_mag, mean_mag_err, t_ref : float
        Common mean of the final fit and the phase reference time.
    nterms : tuple of int
        Harmonics fitted with each frequency.
    chi2, dof, reduced_chi2, rms : float, int, float, float
        Of the final simultaneous fit (rms unweighted, mag).
    stop_reason : str
        Plain words: why no further frequency was accepted.
    stop_frequency, stop_amplitude, stop_noise, stop_snr : float
        The rejected candidate (NaN if the search ended for another reason).
    relations : tuple of str
        Harmonics and combinations noticed, e.g. ``"f3 = f1 + f2"``.
    snr_limit, noise_window : float
        Settings used.
    warnings : tuple of str
    params, covariance : np.ndarray
        Final parameter vector ``[m, f_1, a_11, b_11, ...]`` and scaled covariance.
    """

    frequencies: tuple[FoundFrequency, ...]
    mean_mag: float
    mean_mag_err: float
    t_ref: float
    nterms: tuple[int, ...]
    chi2: float
    dof: int
    reduced_chi2: float
    rms: float
    stop_reason: str
    stop_frequency: float
    stop_amplitude: float
    stop_noise: float
    stop_snr: float
    relations: tuple[str, ...]
    snr_limit: float
    noise_window: float
    warnings: tuple[str, ...]
    params: np.ndarray = field(repr=False)
    covariance: np.ndarray = field(repr=False)

    _json_exclude = ("params", "covariance")

    def model(self, t: Any) -> np.ndarray:
        """The fitted multi-frequency model at times ``t``."""
        tau = np.asarray(t, dtype=float) - self.t_ref
        mod, _ = model_jacobian(self.params, tau.ravel(), len(self.frequencies), self.nterms, want_jac=False)
        return mod.reshape(tau.shape)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict (NaN becomes None): the method, the phase convention, then the fields
        (``params`` and ``covariance`` left out)."""
        return {
            "method": (
                "iterative prewhitening: periodogram peak, simultaneous non-linear least squares of all "
                "frequencies, amplitude S/N against the mean residual amplitude spectrum (Breger et al. 1993)"
            ),
            "phase_convention": "y = mean_mag + sum_i sum_k A_ik cos(2 pi k f_i (t - t_ref) + phi_ik)",
            **super().to_dict(),
        }


#: A year in days: the seasonal sidebands of nightly systematics lie at multiples of 1/YEAR_D c/d.
YEAR_D = 365.25

#: Marks a frequency that sits where nightly systematics show (see :func:`_relations`).
SYSTEMATICS = "nightly systematics?"


def _systematics(f: float, tol: float) -> str:
    """``"n c/d + m c/yr (nightly systematics?)"`` when ``f`` lies within ``tol`` of such a frequency.

    Errors that follow the hour angle or the airmass through each night (extinction,
    a colour term, flat-field drift) repeat with the solar or sidereal day, and their
    slow seasonal change adds sidebands at whole cycles per year: they appear at
    ``n c/d + m c/yr`` (one sidereal day is 1 c/d + 1 c/yr), and a residual search of a
    long series finds them (common practice: the window function of single-site data).
    """
    for n in range(1, 7):
        m = round((f - n) * YEAR_D)
        if abs(m) <= n + 1 and abs(f - n - m / YEAR_D) <= tol:
            side = "" if m == 0 else f" {'+' if m > 0 else '-'} {abs(m)} c/yr"
            return f"{n} c/d{side} ({SYSTEMATICS})"
    return ""


def _relations(freqs: np.ndarray, tol: float) -> list[str]:
    """Per frequency: a harmonic or two-term combination of earlier (stronger) ones, a frequency
    of nightly systematics (whole cycles per day and per year, :func:`_systematics`), or ''."""
    out = []
    for j, fj in enumerate(freqs):
        rel, best = "", math.inf
        for i in range(j):  # loops over the few found frequencies only
            for k in range(2, 6):
                d = abs(fj - k * freqs[i]) / (k * tol)
                if d <= 1 and d < best:
                    rel, best = f"{k} f{i + 1}", d
            for l in range(i + 1, j):
                d = abs(fj - (freqs[i] + freqs[l])) / (2 * tol)
                if d <= 1 and d < best:
                    rel, best = f"f{i + 1} + f{l + 1}", d
                hi, lo = (l, i) if freqs[l] > freqs[i] else (i, l)
                d = abs(fj - (freqs[hi] - freqs[lo])) / (2 * tol)
                if d <= 1 and d < best:
                    rel, best = f"f{hi + 1} - f{lo + 1}", d
        if rel and any(SYSTEMATICS in out[int(i) - 1] for i in re.findall(r"f(\d+)", rel)):
            rel += f" ({SYSTEMATICS})"  # a harmonic or combination of systematics is systematics
        out.append(rel or (_systematics(float(fj), tol) if j > 0 else ""))
    return out


def _best_alias(tau, y, whiten, accepted, terms, nterms, trials) -> float:
    """The trial frequency whose harmonics, added at fixed frequencies to the current model,
    lower chi-square the most.

    The chi-square drop of added columns ``B`` to a least-squares fit on columns ``A``
    with residual ``r`` is ``u^T S^-1 u`` with ``u = B^T r`` and the Schur complement
    ``S = B^T B - B^T A (A^T A)^-1 A^T B`` (the same as refitting everything, from products
    with the few new columns only; common linear algebra).
    """
    a_mat = whiten(design_matrix(tau, np.asarray(accepted, dtype=float), terms))
    wy = whiten(y)
    gram, beta = solve_linear(a_mat, wy, len(accepted), terms)
    r = wy - a_mat @ beta
    best, drop = float(trials[0]), -np.inf
    for f_try in trials:
        b_mat = whiten(design_matrix(tau, np.array([f_try]), (nterms,))[:, 1:])
        ab = a_mat.T @ b_mat
        schur = b_mat.T @ b_mat - ab.T @ np.linalg.solve(gram, ab)
        u = b_mat.T @ r
        try:
            d = float(u @ np.linalg.solve(schur, u))
        except np.linalg.LinAlgError:  # the sampling cannot tell this trial from the model
            continue
        if d > drop:
            best, drop = float(f_try), d
    return best


def prewhiten(
    t: Any,
    y: Any,
    dy: Any,
    freq: Any,
    periodogram: Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray],
    *,
    nterms: int = 1,
    snr_limit: float = 4.0,
    max_frequencies: int = 10,
    noise_window: float = 1.0,
    relation_tolerance: float | None = None,
    first: float | None = None,
    first_nterms: int = 1,
    group: Any = None,
    group_err: Any = None,
    fap_limit: float | None = None,
    alias_trials: bool = False,
) -> PrewhiteningResult:
    """Find the frequencies of a multiperiodic light curve by iterative prewhitening.

    Parameters
    ----------
    t, y, dy : array_like
        Times (days), magnitudes and 1-sigma errors.
    freq : array_like
        Frequency grid (cycles/day) searched for each new peak.
    periodogram : callable
        ``periodogram(t, y, dy, freq) -> power`` (larger = stronger), used only to
        locate the highest peak of the residuals.
    nterms : int
        Harmonics fitted with each frequency found (1 = pure sinusoids; found
        harmonics are then reported as relations).
    snr_limit : float
        Minimum amplitude S/N of an accepted frequency (4: Breger et al. 1993).
    max_frequencies : int
        Upper bound on the number of frequencies (``first`` included).
    noise_window : float
        Width (cycles/day) of the window, centred on a frequency, where the noise is
        averaged.
    relation_tolerance : float, optional
        Tolerance (cycles/day) for naming harmonics/combinations; default ``1/T``.
    first : float, optional
        A frequency already known (the main period's), fitted first with
        ``first_nterms`` harmonics.  Residual peaks at its harmonics and
        half-harmonics (``k first / 2``) are then not taken as new frequencies: they
        describe the shape of the main signal, or say that it repeats only after
        twice its period, which :func:`.pdm.choose_p_or_2p` decides.
    group, group_err : array_like, optional
        Night label of each point and each night's calibration error
        (:mod:`.nightly`): fits are then generalised least squares, and the
        residuals searched for new peaks have each night's estimated offset
        removed, so calibration steps between nights do not pose as frequencies.
    fap_limit : float, optional
        Also require the false-alarm probability (Baluev 2008, over the whole
        grid) of the residual periodogram's peak to be at most this; the
        ``periodogram`` must then give the standard generalised Lomb-Scargle power.
    alias_trials : bool
        Also fit the residual peak's +-1 and +-2 c/d (sidereal) aliases with the whole
        model and keep the one with the smallest chi-square.

    Returns
    -------
    PrewhiteningResult
    """
    t, y, dy = check_series(t, y, dy, what="prewhitening")
    freq = check_freq(freq)
    if not callable(periodogram):
        raise InputError("prewhitening: 'periodogram' must be a function periodogram(t, y, dy, freq) -> power")
    nterms = int(nterms)
    if nterms < 1 or int(first_nterms) < 1:
        raise InputError(f"prewhitening: nterms must be at least 1 (got {nterms})")
    if not snr_limit > 0 or not noise_window > 0 or int(max_frequencies) < 1:
        raise InputError("prewhitening: snr_limit and noise_window must be positive and max_frequencies >= 1")
    baseline = float(t.max() - t.min())
    if baseline <= 0:
        raise InputError("prewhitening: all times are equal; a time span is needed")
    w = 1.0 / dy**2
    t_ref = float(np.sum(w * t) / np.sum(w))
    step = 1.0 / (10.0 * baseline)
    resolution = 1.5 / baseline
    whiten = nightly_whitener(dy, group, group_err)

    terms: list[int] = []
    accepted: np.ndarray = np.zeros(0)
    fit = None
    resid = y - np.sum(w * y) / np.sum(w)
    warnings: list[str] = []
    stop = dict(reason="", f=math.nan, amp=math.nan, noise=math.nan, snr=math.nan)
    blocked = np.zeros(freq.size, dtype=bool)
    aliases_cpd = np.array([0.0, -1.0027379, 1.0027379, -2.0054758, 2.0054758]) if alias_trials else np.zeros(1)
    skipped = 0

    def is_harmonic(f: float) -> bool:
        """Within the resolution of a harmonic or half-harmonic of ``first``."""
        if first is None:
            return False
        half = 0.5 * float(accepted[0])
        k = round(f / half)
        return k >= 1 and abs(f - k * half) < resolution

    if first is not None:
        fit = fit_sinusoids(t, y, dy, [float(first)], (int(first_nterms),), t_ref, whiten=whiten)
        terms = [int(first_nterms)]
        accepted = fit.params[frequency_index(tuple(terms))].copy()
        resid = fit.resid
        half = 0.5 * float(accepted[0])
        k = np.rint(freq / half)
        blocked |= (k >= 1) & (np.abs(freq - k * half) < resolution)
    while True:
        if accepted.size >= int(max_frequencies):
            stop["reason"] = f"stopped at max_frequencies = {int(max_frequencies)}"
            break
        searched = whiten.without_offsets(resid)
        power = np.asarray(periodogram(t, searched, dy, freq), dtype=float)
        if power.shape != freq.shape:
            raise InputError(
                f"prewhitening: the periodogram returned {power.size} values for {freq.size} frequencies"
            )
        power = np.where(blocked, np.nan, power)
        if not np.any(np.isfinite(power)):
            stop["reason"] = "the periodogram of the residuals has no finite value"
            break
        i_new = int(np.nanargmax(power))
        f_new = float(freq[i_new])
        close = np.abs(accepted - f_new) < resolution
        if close.any():
            near = int(np.flatnonzero(close)[0])
            stop.update(
                reason=(
                    f"the next peak at {f_new:.6f} c/d lies within 1.5/T = {resolution:.5f} c/d of "
                    f"f{near + 1}: unresolved (amplitude or phase change?); a longer time span would separate them"
                ),
                f=f_new,
            )
            break
        fap = math.nan
        if fap_limit is not None:
            from varstar.period.significance import fap_baluev

            fap = float(fap_baluev(float(power[i_new]), freq, t, dy, nterms=1))
        new_terms = tuple(terms) + (nterms,)
        # The residual peak and its daily aliases: with single-site nights the noise can lift
        # an alias above the true peak, so each is added to the whole model (at fixed
        # frequencies) and the one with the smallest chi-square is taken, then refined
        # (common practice: aliases are told apart by the fit, not by the periodogram alone).
        f_best = f_new
        if aliases_cpd.size > 1:
            try:
                f_best = _best_alias(t - t_ref, y, whiten, accepted, tuple(terms), nterms,
                                     f_new + aliases_cpd[f_new + aliases_cpd > 0])  # aliases may lie beyond the grid
            except ReductionError as exc:
                stop.update(reason=f"the alias comparison at {f_new:.6f} c/d failed: {exc}", f=f_new)
                break
        else:
            try:
                trial = fit_sinusoids(t, y, dy, np.append(accepted, f_new), new_terms, t_ref, whiten=whiten)
            except ReductionError as exc:  # degenerate sampling for this set: reported as the stop reason
                stop.update(reason=f"the fit with the candidate at {f_new:.6f} c/d failed: {exc}", f=f_new)
                break
        if aliases_cpd.size > 1:
            try:
                trial = fit_sinusoids(t, y, dy, np.append(accepted, f_best), new_terms, t_ref, whiten=whiten)
            except ReductionError as exc:
                stop.update(reason=f"the fit with the candidate at {f_best:.6f} c/d failed: {exc}", f=f_best)
                break
        if f_best != f_new and is_harmonic(f_best):
            # the peak is an alias of a harmonic of the main signal: not a new frequency
            blocked |= np.abs(freq - f_new) < resolution
            skipped += 1
            if skipped > 3 * int(max_frequencies):
                stop["reason"] = "the strongest residual peaks are aliases of the main signal's harmonics"
                break
            continue
        k_new = accepted.size
        base = int(frequency_index(new_terms)[k_new])
        f_fit = float(trial.params[base])
        amp = math.hypot(trial.params[base + 1], trial.params[base + 2])
        noise = _noise(t, trial.resid, dy, f_fit, noise_window, step)
        snr = amp / noise if noise > 0 else math.inf
        if snr < snr_limit or (fap_limit is not None and not fap <= fap_limit):
            why = (f"amplitude S/N {snr:.2f} < {snr_limit:g}" if snr < snr_limit
                   else f"false-alarm probability {fap:.2g} > {fap_limit:g} (S/N {snr:.1f})")
            stop.update(reason=f"the next peak at {f_fit:.6f} c/d has {why}", f=f_fit, amp=amp, noise=noise, snr=snr)
            break
        if not trial.converged:
            warnings.append(f"fit with {k_new + 1} frequencies: solver did not report convergence ({trial.message})")
        if abs(f_fit - f_best) > 0.5 / baseline:
            warnings.append(
                f"f{k_new + 1} moved from the peak at {f_best:.6f} to {f_fit:.6f} c/d during the fit"
            )
        fit = trial
        terms = list(new_terms)
        accepted = trial.params[frequency_index(new_terms)].copy()
        resid = trial.resid

    p, cov = fit.params, fit.covariance
    tol = 1.0 / baseline if relation_tolerance is None else float(relation_tolerance)
    rels = _relations(accepted, tol)
    found = []
    for i, (f_i, base, nt) in enumerate(zip(accepted, frequency_index(tuple(terms)), terms)):
        amp, phi, g_a, g_p = amplitude_phase(p[base + 1], p[base + 2])
        ga = np.zeros(p.size)
        gp = np.zeros(p.size)
        ga[base + 1 : base + 3] = g_a
        gp[base + 1 : base + 3] = g_p
        f_err = sd(cov[base, base])
        noise = _noise(t, fit.resid, dy, f_i, noise_window, step)
        harm = tuple(
            float(math.hypot(p[base + 1 + 2 * k], p[base + 2 + 2 * k])) for k in range(nt)
        )
        found.append(
            FoundFrequency(
                label=f"f{i + 1}",
                frequency=float(f_i),
                frequency_err=float(f_err),
                period=float(1.0 / f_i),
                period_err=float(f_err / f_i**2),
                amplitude=amp,
                amplitude_err=propagated_err(ga, cov),
                phase=phi,
                phase_err=propagated_err(gp, cov),
                snr=float(amp / noise) if noise > 0 else math.inf,
                noise=float(noise),
                harmonic_amplitudes=harm,
                relation=rels[i],
            )
        )
    relations = tuple(f"{ff.label} = {ff.relation}" for ff in found if ff.relation)
    return PrewhiteningResult(
        frequencies=tuple(found),
        mean_mag=float(p[0]),
        mean_mag_err=sd(cov[0, 0]),
        t_ref=t_ref,
        nterms=tuple(terms),
        chi2=fit.chi2,
        dof=fit.dof,
        reduced_chi2=fit.chi2 / fit.dof if fit.dof > 0 else math.nan,
        rms=float(np.sqrt(np.mean(fit.resid**2))),
        stop_reason=stop["reason"],
        stop_frequency=float(stop["f"]),
        stop_amplitude=float(stop["amp"]),
        stop_noise=float(stop["noise"]),
        stop_snr=float(stop["snr"]),
        relations=relations,
        snr_limit=float(snr_limit),
        noise_window=float(noise_window),
        warnings=tuple(warnings),
        params=p.copy(),
        covariance=cov.copy(),
    )

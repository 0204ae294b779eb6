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

How the code runs: :func:`_setup` checks the arguments once (a frozen
:class:`_Setup`); :func:`_start` makes the search's state (:class:`_Search`, the
one mutable record: accepted frequencies, their fit, the blocked grid
frequencies, why the search stopped); :func:`_round` is one round (peak, trial
fit, acceptance) and ends the search at any of its exits; :func:`_found` turns the
final fit into :class:`FoundFrequency` values (:mod:`.prewhiten_result`).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any, Callable

import numpy as np

from varstar.errors import InputError, ReductionError
from varstar.results import sd
from varstar.period import gls
from varstar.period._common import check_freq, check_series, propagated_err
from varstar.period.nightly import NightlyWhitener, nightly_whitener
from varstar.period.sinusoids import (
    SinusoidFit,
    amplitude_phase,
    design_matrix,
    fit_sinusoids,
    frequency_index,
    solve_linear,
)
from varstar.period.prewhiten_result import FoundFrequency, PrewhiteningResult

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


@dataclass(frozen=True)
class _Setup:
    """What every round of the search reads and never changes: the checked series and the settings.

    ``t, y, dy`` the points, ``freq`` the grid searched, ``periodogram`` the peak
    finder; ``t_ref`` the weighted mean time (phase reference), ``baseline`` the time
    span, ``step`` the noise grid's step ``1/(10 T)``, ``resolution`` ``1.5/T``;
    ``whiten`` the nights' covariance (:mod:`.nightly`); ``aliases_cpd`` the offsets
    tried at each peak (only 0 without alias trials); the other fields are the
    arguments of :func:`prewhiten` of the same names (``max_frequencies`` an int).
    """

    t: np.ndarray
    y: np.ndarray
    dy: np.ndarray
    freq: np.ndarray
    periodogram: Callable[[np.ndarray, np.ndarray, np.ndarray, np.ndarray], np.ndarray]
    nterms: int
    snr_limit: float
    max_frequencies: int
    noise_window: float
    relation_tolerance: float | None
    first: float | None
    first_nterms: int
    fap_limit: float | None
    baseline: float
    t_ref: float
    step: float
    resolution: float
    whiten: NightlyWhitener
    aliases_cpd: np.ndarray


@dataclass(frozen=True)
class _Stop:
    """Why the search ended, and the rejected candidate's frequency, amplitude, noise and S/N (NaN if none)."""

    reason: str
    f: float = math.nan
    amp: float = math.nan
    noise: float = math.nan
    snr: float = math.nan


@dataclass(eq=False)
class _Search:
    """The state of the search: explicitly mutable, changed by :func:`_start` and each round.

    ``accepted`` the accepted frequencies (their fitted values, in the order found),
    ``terms`` the harmonics of each; ``fit`` the last accepted simultaneous fit (None
    until one is accepted) and ``resid`` the data less it (less the weighted mean
    before); ``blocked`` the grid frequencies the peak search skips (harmonics and
    half-harmonics of ``first``, and peaks found to be aliases of them);
    ``skipped`` how many such alias peaks were passed over; ``warnings`` in the order
    raised; ``stop`` why the search ended (set by the round that ends it).
    """

    accepted: np.ndarray
    terms: tuple[int, ...]
    fit: SinusoidFit | None
    resid: np.ndarray
    blocked: np.ndarray
    skipped: int = 0
    warnings: list[str] = field(default_factory=list)
    stop: _Stop | None = None


def _setup(t, y, dy, freq, periodogram, *, nterms, snr_limit, max_frequencies, noise_window, relation_tolerance,
           first, first_nterms, group, group_err, fap_limit, alias_trials) -> _Setup:
    """Check the arguments of :func:`prewhiten` (same order, same messages) and prepare the series.

    Takes the arguments of :func:`prewhiten`; returns the :class:`_Setup` of the search.
    Raises InputError for bad series or settings, or when all times are equal.
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
    return _Setup(
        t=t, y=y, dy=dy, freq=freq, periodogram=periodogram, nterms=nterms, snr_limit=snr_limit,
        max_frequencies=int(max_frequencies), noise_window=noise_window, relation_tolerance=relation_tolerance,
        first=first, first_nterms=int(first_nterms), fap_limit=fap_limit, baseline=baseline,
        t_ref=float(np.sum(w * t) / np.sum(w)), step=1.0 / (10.0 * baseline), resolution=1.5 / baseline,
        whiten=nightly_whitener(dy, group, group_err),
        aliases_cpd=(np.array([0.0, -1.0027379, 1.0027379, -2.0054758, 2.0054758]) if alias_trials
                     else np.zeros(1)),
    )


def _start(c: _Setup) -> _Search:
    """The state before the first round.

    Takes the setup; returns a :class:`_Search` with nothing accepted (residuals:
    the data less their weighted mean), or, when ``first`` is given, ``first``
    fitted with ``first_nterms`` harmonics and its harmonics and half-harmonics
    (``k first / 2``, within the resolution) blocked.
    """
    w = 1.0 / c.dy**2
    s = _Search(accepted=np.zeros(0), terms=(), fit=None, resid=c.y - np.sum(w * c.y) / np.sum(w),
                blocked=np.zeros(c.freq.size, dtype=bool))
    if c.first is not None:
        s.fit = fit_sinusoids(c.t, c.y, c.dy, [float(c.first)], (c.first_nterms,), c.t_ref, whiten=c.whiten)
        s.terms = (c.first_nterms,)
        s.accepted = s.fit.params[frequency_index(s.terms)].copy()
        s.resid = s.fit.resid
        half = 0.5 * float(s.accepted[0])
        k = np.rint(c.freq / half)
        s.blocked |= (k >= 1) & (np.abs(c.freq - k * half) < c.resolution)
    return s


def _round(c: _Setup, s: _Search) -> bool:
    """One round: the residuals' highest free peak, its trial fit, then acceptance or the end.

    Takes the setup and the state (changed in place); returns True to go on, False
    when the search has ended (``s.stop`` then says why).  The exits: at
    ``max_frequencies``; no finite periodogram value, or a peak unresolved from an
    accepted frequency (:func:`_residual_peak`); a failed alias comparison or trial
    fit (:func:`_trial_fit`); too many peaks that are aliases of the main signal's
    harmonics (:func:`_skip_alias`); a candidate below the S/N or FAP limits
    (:func:`_accept`).
    """
    if s.accepted.size >= c.max_frequencies:
        s.stop = _Stop(f"stopped at max_frequencies = {c.max_frequencies}")
        return False
    peak = _residual_peak(c, s)
    if peak is None:
        return False
    f_new, fap = peak
    new_terms = s.terms + (c.nterms,)
    tried = _trial_fit(c, s, f_new, new_terms)
    if tried is None:
        return False
    f_best, trial = tried
    if f_best != f_new and _is_harmonic(c, s, f_best):
        return _skip_alias(c, s, f_new)
    return _accept(c, s, trial, f_best, fap, new_terms)


def _residual_peak(c: _Setup, s: _Search) -> tuple[float, float] | None:
    """The highest peak of the residuals' periodogram outside the blocked frequencies.

    Takes the setup and the state; returns the peak's grid frequency and, with
    ``fap_limit``, its false-alarm probability (Baluev 2008, over the grid; NaN
    without).  Returns None, with ``s.stop`` set, when no value is finite or the peak
    lies within the resolution of an accepted frequency.  The residuals searched
    have each night's estimated offset removed.
    """
    searched = c.whiten.without_offsets(s.resid)
    power = np.asarray(c.periodogram(c.t, searched, c.dy, c.freq), dtype=float)
    if power.shape != c.freq.shape:
        raise InputError(
            f"prewhitening: the periodogram returned {power.size} values for {c.freq.size} frequencies"
        )
    power = np.where(s.blocked, np.nan, power)
    if not np.any(np.isfinite(power)):
        s.stop = _Stop("the periodogram of the residuals has no finite value")
        return None
    i_new = int(np.nanargmax(power))
    f_new = float(c.freq[i_new])
    close = np.abs(s.accepted - f_new) < c.resolution
    if close.any():
        near = int(np.flatnonzero(close)[0])
        s.stop = _Stop(
            f"the next peak at {f_new:.6f} c/d lies within 1.5/T = {c.resolution:.5f} c/d of "
            f"f{near + 1}: unresolved (amplitude or phase change?); a longer time span would separate them",
            f=f_new,
        )
        return None
    fap = math.nan
    if c.fap_limit is not None:
        from varstar.period.significance import fap_baluev

        fap = float(fap_baluev(float(power[i_new]), c.freq, c.t, c.dy, nterms=1))
    return f_new, fap


def _trial_fit(c: _Setup, s: _Search, f_new: float, new_terms: tuple[int, ...]) -> tuple[float, SinusoidFit] | None:
    """The candidate, and the simultaneous fit of all accepted frequencies with it.

    Takes the peak ``f_new`` and the harmonics of every frequency with the new one
    (``new_terms``).  With alias trials the candidate is whichever of the peak and its
    +-1 and +-2 c/d (sidereal) aliases, added to the whole model at fixed
    frequencies, lowers chi-square most (:func:`_best_alias`): with single-site
    nights the noise can lift an alias above the true peak (common practice: aliases
    are told apart by the fit, not by the periodogram alone); aliases may lie beyond
    the grid.  Returns ``(candidate, fit)``, or None with ``s.stop`` set when the
    comparison or the fit fails (degenerate sampling for this set).
    """
    f_best = f_new
    if c.aliases_cpd.size > 1:
        try:
            f_best = _best_alias(c.t - c.t_ref, c.y, c.whiten, s.accepted, s.terms, c.nterms,
                                 f_new + c.aliases_cpd[f_new + c.aliases_cpd > 0])
        except ReductionError as exc:
            s.stop = _Stop(f"the alias comparison at {f_new:.6f} c/d failed: {exc}", f=f_new)
            return None
    try:
        trial = fit_sinusoids(c.t, c.y, c.dy, np.append(s.accepted, f_best), new_terms, c.t_ref, whiten=c.whiten)
    except ReductionError as exc:
        s.stop = _Stop(f"the fit with the candidate at {f_best:.6f} c/d failed: {exc}", f=f_best)
        return None
    return f_best, trial


def _is_harmonic(c: _Setup, s: _Search, f: float) -> bool:
    """Whether ``f`` lies within the resolution of a harmonic or half-harmonic of ``first`` (as fitted)."""
    if c.first is None:
        return False
    half = 0.5 * float(s.accepted[0])
    k = round(f / half)
    return k >= 1 and abs(f - k * half) < c.resolution


def _skip_alias(c: _Setup, s: _Search, f_new: float) -> bool:
    """Pass over a peak whose best alias is a harmonic of the main signal: not a new frequency.

    Blocks the peak ``f_new`` (within the resolution) and counts it; returns False,
    with ``s.stop`` set, after more than ``3 max_frequencies`` such peaks, else True.
    """
    s.blocked |= np.abs(c.freq - f_new) < c.resolution
    s.skipped += 1
    if s.skipped > 3 * c.max_frequencies:
        s.stop = _Stop("the strongest residual peaks are aliases of the main signal's harmonics")
        return False
    return True


def _accept(c: _Setup, s: _Search, trial: SinusoidFit, f_best: float, fap: float,
            new_terms: tuple[int, ...]) -> bool:
    """Accept the candidate of ``trial`` if its amplitude S/N (and FAP) pass, else end the search.

    Takes the trial fit with the candidate last, the candidate's frequency before
    the fit (``f_best``) and its FAP.  The noise is the mean residual amplitude
    spectrum around the fitted frequency (:func:`_noise`).  On acceptance the state
    takes the trial's frequencies, harmonics, fit and residuals (with warnings for a
    fit that did not report convergence or a frequency that moved by more than
    ``0.5/T``) and True is returned; otherwise ``s.stop`` records the rejected
    candidate and False is returned.
    """
    k_new = s.accepted.size
    base = int(frequency_index(new_terms)[k_new])
    f_fit = float(trial.params[base])
    amp = math.hypot(trial.params[base + 1], trial.params[base + 2])
    noise = _noise(c.t, trial.resid, c.dy, f_fit, c.noise_window, c.step)
    snr = amp / noise if noise > 0 else math.inf
    if snr < c.snr_limit or (c.fap_limit is not None and not fap <= c.fap_limit):
        why = (f"amplitude S/N {snr:.2f} < {c.snr_limit:g}" if snr < c.snr_limit
               else f"false-alarm probability {fap:.2g} > {c.fap_limit:g} (S/N {snr:.1f})")
        s.stop = _Stop(f"the next peak at {f_fit:.6f} c/d has {why}", f=f_fit, amp=amp, noise=noise, snr=snr)
        return False
    if not trial.converged:
        s.warnings.append(f"fit with {k_new + 1} frequencies: solver did not report convergence ({trial.message})")
    if abs(f_fit - f_best) > 0.5 / c.baseline:
        s.warnings.append(
            f"f{k_new + 1} moved from the peak at {f_best:.6f} to {f_fit:.6f} c/d during the fit"
        )
    s.fit = trial
    s.terms = new_terms
    s.accepted = trial.params[frequency_index(new_terms)].copy()
    s.resid = trial.resid
    return True


def _found(c: _Setup, s: _Search) -> tuple[FoundFrequency, ...]:
    """The accepted frequencies from the final simultaneous fit, with errors, S/N and relations.

    Takes the setup and the ended search; returns one :class:`FoundFrequency` per
    accepted frequency, in the order found (noise around each from the final
    residuals; relations within ``relation_tolerance``, default ``1/T``).
    """
    p, cov = s.fit.params, s.fit.covariance
    tol = 1.0 / c.baseline if c.relation_tolerance is None else float(c.relation_tolerance)
    rels = _relations(s.accepted, tol)
    found = []
    for i, (f_i, base, nt) in enumerate(zip(s.accepted, frequency_index(s.terms), s.terms)):
        amp, phi, g_a, g_p = amplitude_phase(p[base + 1], p[base + 2])
        ga = np.zeros(p.size)
        gp = np.zeros(p.size)
        ga[base + 1 : base + 3] = g_a
        gp[base + 1 : base + 3] = g_p
        f_err = sd(cov[base, base])
        noise = _noise(c.t, s.fit.resid, c.dy, f_i, c.noise_window, c.step)
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
    return tuple(found)


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
        twice its period, which :func:`.p_or_2p.choose_p_or_2p` decides.
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
    c = _setup(t, y, dy, freq, periodogram, nterms=nterms, snr_limit=snr_limit, max_frequencies=max_frequencies,
               noise_window=noise_window, relation_tolerance=relation_tolerance, first=first,
               first_nterms=first_nterms, group=group, group_err=group_err, fap_limit=fap_limit,
               alias_trials=alias_trials)
    s = _start(c)
    while _round(c, s):
        pass
    if s.fit is None:  # nothing accepted and no ``first``: the model is the (weighted) mean alone
        s.fit = fit_sinusoids(c.t, c.y, c.dy, [], (), c.t_ref, whiten=c.whiten)
    found = _found(c, s)
    fit, stop = s.fit, s.stop
    return PrewhiteningResult(
        frequencies=found,
        mean_mag=float(fit.params[0]),
        mean_mag_err=sd(fit.covariance[0, 0]),
        t_ref=c.t_ref,
        nterms=s.terms,
        chi2=fit.chi2,
        dof=fit.dof,
        reduced_chi2=fit.chi2 / fit.dof if fit.dof > 0 else math.nan,
        rms=float(np.sqrt(np.mean(fit.resid**2))),
        stop_reason=stop.reason,
        stop_frequency=float(stop.f),
        stop_amplitude=float(stop.amp),
        stop_noise=float(stop.noise),
        stop_snr=float(stop.snr),
        relations=tuple(f"{ff.label} = {ff.relation}" for ff in found if ff.relation),
        snr_limit=float(snr_limit),
        noise_window=float(noise_window),
        warnings=tuple(s.warnings),
        params=fit.params.copy(),
        covariance=fit.covariance.copy(),
    )

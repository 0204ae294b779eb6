"""One period analysis of a light curve: every method of the package, combined into one answer.

:func:`analyse` is the pure core behind ``varstar period`` and
:meth:`varstar.archive.Archive.period`.  Its steps, in order, each a function
that takes what earlier steps made and returns a small frozen record of its own:

1. a uniform frequency grid from the baseline (:mod:`.grid`), and
2. the generalised Lomb-Scargle periodogram (:mod:`.gls`), or for several bands
   the multi-band periodogram with one shared frequency (:mod:`.multiband`); a
   highest point at an end of the grid is refused
   (:func:`.periodogram.compute_periodogram`);
3. the false-alarm probability of its highest peak (Baluev 2008, :mod:`.significance`),
   and a bootstrap on request (:func:`.periodogram.peak_significance`);
4. the strongest peaks and their relations to the best one (:mod:`.aliases`);
5. phase dispersion minimisation (Stellingwerf 1978) around the candidates
   (:mod:`.pdm`), whose best period competes with the periodogram's
   (:func:`_candidates`; the rule is in :mod:`.rivals`);
6. the main signal's harmonic fit, then a search of the residuals for further
   independent frequencies (:mod:`.prewhiten`: amplitude S/N >= 4, Breger et al.
   1993, and a false-alarm probability <= 0.001 over the grid); found ones are fitted
   together with the main signal and the star is called multi-periodic
   (:func:`_main_signal`);
7. P or 2P on the main signal alone, the other frequencies removed (equal-minima
   binaries, :func:`.p_or_2p.choose_p_or_2p`; :func:`_period_choice`);
8. the adopted model per band: a harmonic fit with free frequency (:mod:`.refine`,
   number of harmonics by AIC) for pulsators, with epoch of maximum light and
   Fourier parameters; for eclipsing binaries (epoch of minimum) a template of the
   star's own folded curve that follows narrow eclipses (:mod:`.template`;
   :func:`_band_models`);
9. the bands' frequencies combined into the adopted period, with its epoch and
   amplitude; a period the data cannot constrain is refused (:func:`_adopted`);
10. the main signal's model fitted at each rival alias peak of an insecure
    periodogram (:func:`_alias_verdict`, :func:`.rivals.check_rivals`);
11. the final model's frequencies and the star's modes in words (:mod:`.modes`);
12. PDM's summary at the adopted period (:func:`_pdm_summary`).

Warnings are returned by the step that raises them and joined in step order (the
order of the result's warnings).

Errors: every fit is weighted least squares with the covariance scaled by the
reduced chi-square; when the nights' calibration errors are given (``night`` and
``cal_err``), each night's error is a covariance shared by its points
(:mod:`.nightly`), so the nights' offsets are in every error.
"""


from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.period import aliases, gls, p_or_2p, pdm, prewhiten, refine
from varstar.period.modes import final_frequencies
from varstar.period.nightly import nightly_whitener
from varstar.period.periodogram import FAP_LEVELS, Periodogram, compute_periodogram, peak_significance
from varstar.period.refine import MAX_AUTO_HARMONICS
from varstar.period.result import PROBABILITY_FLOOR, PeriodResult, format_probability
from varstar.period.rivals import check_rivals, pdm_versus_periodogram, rival_2p
from varstar.period.series import Points, Series, as_series, make_series, span_words
from varstar.period.sinusoids import fit_sinusoids, model_jacobian
from varstar.threads import blas_threads

# Constants that lived here before their steps moved to their own modules, still importable from here.
from varstar.period.modes import KNOWN_RATIOS  # noqa: F401
from varstar.period.rivals import ALIAS_DCHI2  # noqa: F401

__all__ = ["FAP_LEVELS", "MAX_PDM_ELEMENTS", "PROBABILITY_FLOOR", "PeriodResult", "analyse", "format_probability"]

#: Above this many (points x frequencies) PDM is evaluated only around the
#: strongest periodogram peaks and PDM's own coarse minima (the whole grid at the
#: budget is under a second of work on one core; ``benchmarks/bench_period.py --kernels``).
MAX_PDM_ELEMENTS = pdm.DEFAULT_BUDGET


# --------------------------------------------------------------------------- helpers of the steps


def _check_constrained(period: float, period_err: float, baseline: float, night: Any) -> None:
    """Refuse an adopted period the data cannot support: longer than the light curve, or without an error.

    A period is measured only when at least one whole cycle is observed (common
    practice); a fit that runs beyond that, or whose covariance gives no finite
    error, has no answer to report, and a script must not read one.
    """
    span = span_words(baseline, night)
    if period > baseline:
        raise InputError(
            f"period analysis: the best fit wants a period of {period:.4g} d, longer than the light curve's span "
            f"of {span}: no whole cycle is observed; observe more nights (or over a longer span) and try again"
        )
    if not (math.isfinite(period_err) and period_err > 0):
        raise InputError(
            f"period analysis: the period {period:.6g} d is not constrained by these data (its error cannot be "
            f"computed; span {span}): observe more nights, or fix fewer harmonics with --harmonics"
        )


def _eclipse_like(fit: refine.HarmonicFit) -> bool:
    """True when the model stays near its brightest level for most of the cycle, with dips.

    An eclipsing binary outside eclipse is nearly constant at maximum light; a
    pulsator passes maximum light quickly (a sinusoid spends a quarter of its cycle
    within 15% of its range from the bright end).  Half the cycle is this module's
    threshold (common practice: "flat maxima and narrow minima" is how an
    eclipsing light curve is recognised by eye).
    """
    phase = np.linspace(0.0, 1.0, 1000, endpoint=False)
    m = fit.model(fit.t_ref + phase / fit.frequency)
    span = float(m.max() - m.min())
    return bool(span > 0 and np.mean(m <= m.min() + 0.15 * span) >= 0.5)


def _others_in_band(t, y, dy, t_ref, f_main, k_main, others, group, group_err):
    """Joint fit of the main signal and the further frequencies in one band; returns the
    further frequencies' part as a function of time (fitted amplitudes of this band)."""
    terms = (k_main,) + (1,) * len(others)
    whiten = nightly_whitener(dy, group, group_err)
    fit = fit_sinusoids(t, y, dy, [f_main, *others], terms, t_ref, whiten=whiten)
    params = fit.params.copy()
    params[1 : 2 + 2 * k_main] = 0.0  # main signal (its frequency and harmonics) removed
    params[0] = 0.0
    params[1] = f_main

    def extra(tt: Any) -> np.ndarray:
        tau = np.asarray(tt, dtype=float) - t_ref
        mod, _ = model_jacobian(params, tau.ravel(), len(terms), terms, want_jac=False)
        return mod.reshape(tau.shape)

    return extra


def _combine_bands(per_band: dict[str, Any], bands: tuple[str, ...], reference: str,
                   warnings: list[str]) -> tuple[float, float]:
    """The adopted frequency and error: the bands' fits by inverse-variance weighting (a warning when
    they disagree), or the reference band's alone (one band, or an error that is not finite)."""
    f_vals = np.array([per_band[b].frequency for b in bands])
    f_errs = np.array([per_band[b].frequency_err for b in bands])
    if len(bands) > 1 and np.all(np.isfinite(f_errs) & (f_errs > 0)):
        wts = 1.0 / f_errs**2
        frequency = float(np.sum(wts * f_vals) / np.sum(wts))
        frequency_err = float(1.0 / np.sqrt(np.sum(wts)))
        chi2 = float(np.sum(wts * (f_vals - frequency) ** 2))
        if chi2 > len(bands) - 1 + 3 * math.sqrt(2 * (len(bands) - 1)):
            warnings.append(f"the bands' fitted frequencies disagree (chi2 = {chi2:.1f} for {len(bands) - 1} dof)")
        return frequency, frequency_err
    return float(per_band[reference].frequency), float(per_band[reference].frequency_err)


def _errors_words(s: Series) -> str:
    """How the errors were computed, in words: with the nights' shared calibration errors or without."""
    nightly = s.group is not None and bool(np.any(s.group_err > 0))
    return ("each night's calibration error (cal_err) is shared by its points: generalised least squares, "
            "as a per-night offset with that prior; covariance scaled by the reduced chi-square"
            if nightly else "points independent with their errors; covariance scaled by the reduced chi-square")


# --------------------------------------------------------------------------- the steps of analyse()


def _check_settings(epoch_kind: Any, nterms: Any, harmonics: Any, bootstrap: int, rng: Any,
                    max_frequencies: Any) -> int:
    """Refuse bad settings of :func:`analyse` (in this order); returns the checked ``nterms``."""
    if epoch_kind not in (None, "maximum", "minimum"):
        raise InputError(f"period analysis: epoch_kind must be 'maximum' or 'minimum' (got {epoch_kind!r})")
    nterms = gls.check_nterms(nterms)
    if harmonics is not None and int(harmonics) < 1:
        raise InputError(f"period analysis: harmonics must be at least 1 (got {harmonics})")
    if bootstrap < 0:
        raise InputError(f"period analysis: bootstrap must be 0 or a positive count (got {bootstrap})")
    if bootstrap and rng is None:
        raise InputError("period analysis: a bootstrap needs a random generator or seed (rng)")
    if int(max_frequencies) < 1:
        raise InputError(f"period analysis: max_frequencies must be at least 1 (got {max_frequencies})")
    return nterms


@dataclass(frozen=True)
class _Candidates:
    """Step 5: PDM's search and the frequency the main signal is refined from.

    ``theta``/``where`` PDM on the grid and where it was evaluated; ``f_pdm`` and
    ``theta_pdm`` its lowest point; ``f_cand`` the frequency chosen;
    ``entries`` the candidates considered (result's ``candidates``, in order).
    """

    theta: np.ndarray
    where: str
    f_pdm: float
    theta_pdm: float
    f_cand: float
    entries: tuple[dict[str, Any], ...]
    warnings: tuple[str, ...]


def _candidates(ref: Points, pg: Periodogram, report: aliases.AliasReport, nterms: int, pdm_bins: int,
                z_crit: float, baseline: float) -> _Candidates:
    """Step 5: PDM around the periodogram's peaks (reference band), and the frequency to refine.

    Takes the reference band's points, the periodogram and its alias report;
    returns a :class:`_Candidates`.  PDM's best frequency replaces the periodogram's
    when phase neighbours predict the points clearly better there
    (:func:`.rivals.pdm_versus_periodogram`); with a multi-harmonic periodogram the half
    frequency is taken when the phased curve repeats at half the period.
    """
    theta, where = pdm.pdm_search(ref.t, ref.y, ref.dy, pg.freq, [p.frequency for p in report.peaks],
                                  n_bins=pdm_bins, budget=MAX_PDM_ELEMENTS)
    j_pdm = int(np.nanargmin(theta))
    f_pdm = float(pg.freq[j_pdm])
    entries: list[dict[str, Any]] = [{
        "period": 1.0 / pg.f_peak, "source": "periodogram peak (grid value, before refinement)", "power": pg.p_peak,
    }]
    warnings: list[str] = []
    f_cand = pdm_versus_periodogram(ref.t, ref.y, ref.dy, pg.f_peak, f_pdm, float(theta[j_pdm]), baseline, z_crit,
                                    entries, warnings)
    if nterms > 1:
        # A multi-harmonic periodogram has as much power at half the frequency (its harmonics
        # include f): keep the longer period only if the phased curve needs it.
        half = p_or_2p.choose_p_or_2p(ref.t, ref.y, ref.dy, 2.0 * f_cand, n_bins=pdm_bins, z_crit=z_crit)
        if half.factor == 1:
            entries.append({"period": 2.0 / half.frequency, "source": "multi-harmonic periodogram peak",
                            "note": "the phased curve repeats at half this period; the half was taken"})
            f_cand = half.frequency
    return _Candidates(theta, where, f_pdm, float(theta[j_pdm]), f_cand, tuple(entries), tuple(warnings))


@dataclass(frozen=True)
class _MainSignal:
    """Step 6: the main signal's harmonic fit (reference band) and the prewhitening of its residuals.

    ``others_f`` are the further frequencies put in the model (none with ``single``);
    ``refined_peaks`` maps the periodogram's grid peak to the refined frequency when
    the main signal was refined from it.
    """

    main: refine.HarmonicFit
    pw: prewhiten.PrewhiteningResult
    others_f: tuple[float, ...]
    refined_peaks: dict[float, float]
    warnings: tuple[str, ...]


def _main_signal(ref: Points, freq: np.ndarray, f_cand: float, f_peak: float, harmonics: int | None, single: bool,
                 snr_limit: float, fap_limit: float, max_frequencies: int) -> _MainSignal:
    """Step 6: fit the main signal at ``f_cand``, then search its residuals for further frequencies.

    Takes the reference band's points, the grid, the candidate and the periodogram's
    peak, and the settings of :func:`analyse`; returns a :class:`_MainSignal`.  The
    number of harmonics is ``harmonics`` or chosen by AIC; with ``single`` the search
    stops after one further frequency, which is only named in a warning.
    """
    top = int(harmonics) if harmonics is not None else MAX_AUTO_HARMONICS
    if harmonics is None:
        main = refine.fit_harmonics_aic(ref.t, ref.y, ref.dy, f_cand, max_nterms=top, group=ref.group,
                                        group_err=ref.group_err)
    else:
        main = refine.fit_harmonics(ref.t, ref.y, ref.dy, f_cand, nterms=top, group=ref.group, group_err=ref.group_err)
    refined_peaks = {f_peak: main.frequency} if f_cand == f_peak else {}
    pw = prewhiten.prewhiten(
        ref.t, ref.y, ref.dy, freq, lambda tt, yy, ee, ff: gls.gls_power(tt, yy, ee, ff, nterms=1),
        first=main.frequency, first_nterms=main.nterms, group=ref.group, group_err=ref.group_err,
        snr_limit=snr_limit, fap_limit=fap_limit, max_frequencies=2 if single else int(max_frequencies),
        alias_trials=True,
    )
    found = pw.frequencies[1:]
    warnings = []
    if single and found and not found[0].relation:
        warnings.append(
            f"a further significant frequency remains in the residuals at P = {found[0].period:.7g} d "
            f"(amplitude S/N {found[0].snr:.1f}): the star is probably multi-periodic; run without --single"
        )
    others_f = () if single else tuple(f.frequency for f in found)
    return _MainSignal(main, pw, others_f, refined_peaks, tuple(warnings))


@dataclass(frozen=True)
class _Choice:
    """Step 7: P or 2P, and what the adopted model needs from it.

    ``f_final`` the frequency of the adopted period; ``min_harm`` the fewest
    harmonics that show it (2 when the curve repeats only after 2P); ``y_main`` the
    reference band's magnitudes less the further frequencies; ``entry`` the
    candidate entry of the rejected one of P and 2P.
    """

    choice: pdm.PeriodChoice
    f_final: float
    min_harm: int
    y_main: np.ndarray
    entry: dict[str, Any]
    warnings: tuple[str, ...]


def _period_choice(ref: Points, ms: _MainSignal, harmonics: int | None, pdm_bins: int, z_crit: float) -> _Choice:
    """Step 7: P or 2P on the main signal alone (reference band), the other frequencies removed.

    Takes the reference band's points and the main signal; returns a :class:`_Choice`.
    A second mode must not make the halves of 2P differ, nor may the nights'
    calibration offsets (cycle parity often goes with the night): the fold is judged
    with each night's estimated offset removed.
    """
    main = ms.main
    others_ref = None
    if ms.others_f:
        others_ref = _others_in_band(ref.t, ref.y, ref.dy, main.t_ref, main.frequency, main.nterms, ms.others_f,
                                     ref.group, ref.group_err)
    y_main = ref.y if others_ref is None else ref.y - others_ref(ref.t)
    whiten = nightly_whitener(ref.dy, ref.group, ref.group_err)
    resid = y_main - main.model(ref.t)
    y_fold = y_main + (whiten.without_offsets(resid) - resid)  # y minus each night's offset
    choice = p_or_2p.choose_p_or_2p(ref.t, y_fold, ref.dy, main.frequency, n_bins=pdm_bins, z_crit=z_crit)
    min_harm = 2 if choice.factor == 2 else 1  # a curve repeating only after 2P needs its 2nd harmonic
    warnings = []
    if harmonics is not None and int(harmonics) < min_harm:
        warnings.append("the light curve repeats only after 2P: the fit uses 2 harmonics to show both halves")
    return _Choice(choice, choice.frequency / choice.factor, min_harm, y_main, rival_2p(choice, z_crit),
                   tuple(warnings))


@dataclass(frozen=True)
class _BandModels:
    """Step 8: the adopted model per band: harmonic fits, further frequencies, eclipse templates.

    ``others`` maps a band to its further frequencies' part as a function of time
    (empty without further frequencies); ``templates`` is empty unless ``kind`` is
    "minimum"; ``kind`` says which extremum the epoch marks.
    """

    fits: dict[str, refine.HarmonicFit]
    others: dict[str, Any]
    templates: dict[str, Any]
    kind: str
    warnings: tuple[str, ...]


def _band_models(s: Series, ms: _MainSignal, ch: _Choice, harmonics: int | None,
                 epoch_kind: str | None) -> _BandModels:
    """Step 8: the main signal fitted (free frequency) in each band, with the further frequencies.

    Takes the series, the main signal and the P-or-2P choice; returns a
    :class:`_BandModels`.  The epoch marks the minimum when asked, when the curve
    repeats only after 2P, or when it looks eclipsing (:func:`_eclipse_like`); the
    period of such a curve comes from an eclipse template per band (:mod:`.template`).
    """
    fits: dict[str, refine.HarmonicFit] = {}
    others: dict[str, Any] = {}
    warnings: list[str] = []
    k_joint = min(MAX_AUTO_HARMONICS, ms.main.nterms * ch.choice.factor)
    for b in s.bands:
        p = s.points(s.band == b)
        yb = p.y
        if ms.others_f:
            w = 1.0 / p.dy**2
            others[b] = _others_in_band(p.t, p.y, p.dy, float(np.sum(w * p.t) / np.sum(w)), ch.f_final, k_joint,
                                        ms.others_f, p.group, p.group_err)
            yb = yb - others[b](p.t)
        if harmonics is None:
            fits[b] = refine.fit_harmonics_aic(p.t, yb, p.dy, ch.f_final, min_nterms=ch.min_harm, group=p.group,
                                               group_err=p.group_err)
        else:
            fits[b] = refine.fit_harmonics(p.t, yb, p.dy, ch.f_final, nterms=max(int(harmonics), ch.min_harm),
                                           group=p.group, group_err=p.group_err)
        warnings.extend(f"{b}: {w}" if s.multi else w for w in fits[b].warnings)
    kind = epoch_kind or ("minimum" if ch.choice.factor == 2 or _eclipse_like(fits[s.reference]) else "maximum")
    templates: dict[str, Any] = {}
    if kind == "minimum":
        from varstar.period import template

        for b in s.bands:
            p = s.points(s.band == b)
            yb = p.y - (others[b](p.t) if b in others else 0.0)
            templates[b] = template.fit_template_period(p.t, yb, p.dy, fits[b].frequency, group=p.group,
                                                        group_err=p.group_err)
    return _BandModels(fits, others, templates, kind, tuple(warnings))


@dataclass(frozen=True)
class _Adopted:
    """Step 9: the adopted period, epoch and amplitude with their errors, and how they were found."""

    frequency: float
    frequency_err: float
    period: float
    period_err: float
    epoch: float
    epoch_err: float
    amplitude: float
    amplitude_err: float
    period_method: str
    n_harm: int
    warnings: tuple[str, ...]


def _adopted(s: Series, bm: _BandModels, harmonics: int | None, n_others: int) -> _Adopted:
    """Step 9: the bands' frequencies combined; the epoch and amplitude of the reference band.

    Takes the series, the band models and the number of further frequencies in the
    model; returns an :class:`_Adopted`.  Raises InputError when the period is
    longer than the light curve or has no finite error (:func:`_check_constrained`).
    """
    warnings: list[str] = []
    n_harm = bm.fits[s.reference].nterms
    frequency, frequency_err = _combine_bands(bm.templates or bm.fits, s.bands, s.reference, warnings)
    period = 1.0 / frequency
    period_err = frequency_err / frequency**2
    _check_constrained(period, period_err, s.baseline, s.night)
    ref = bm.fits[s.reference]
    if bm.templates:
        tpl = bm.templates[s.reference]
        epoch, epoch_err = tpl.epoch_min_light, tpl.epoch_min_light_err
        amplitude, amplitude_err = tpl.ptp_amplitude, float("nan")
        period_method = f"eclipse template: {tpl.method}"
    else:
        amplitude, amplitude_err = ref.ptp_amplitude, ref.ptp_amplitude_err
        if bm.kind == "maximum":
            epoch, epoch_err = ref.epoch_max_light, ref.epoch_max_light_err
        else:
            epoch, epoch_err = ref.epoch_min_light, ref.epoch_min_light_err
        period_method = f"harmonic fit with free frequency ({n_harm} harmonics, {'set' if harmonics else 'chosen by AIC'})"
    if s.multi:
        period_method += f"; bands {', '.join(s.bands)} combined by inverse-variance weighting"
    if n_others:
        period_method += f"; fitted together with {n_others} further frequenc{'y' if n_others == 1 else 'ies'}"
    return _Adopted(frequency, frequency_err, period, period_err, float(epoch), float(epoch_err), amplitude,
                    amplitude_err, period_method, n_harm, tuple(warnings))


def _alias_verdict(report: aliases.AliasReport, ref: Points, ms: _MainSignal,
                   y_main: np.ndarray) -> tuple[list[dict[str, Any]], dict[float, float], tuple[str, ...]]:
    """Step 10: the main signal's model fitted at each insecure rival peak (:func:`.rivals.check_rivals`).

    Takes the alias report, the reference band's points, the main signal and the
    reference magnitudes less the further frequencies; returns the rivals' checks,
    their refined frequencies by grid frequency, and the warnings (the report's note
    when the peak is insecure and no rival was settled by the fits).
    """
    main = ms.main
    best = main if not ms.others_f else refine.fit_harmonics(ref.t, y_main, ref.dy, main.frequency,
                                                              nterms=main.nterms, group=ref.group,
                                                              group_err=ref.group_err)
    alias_check = check_rivals(report, ref.t, y_main, ref.dy, best, ref.group, ref.group_err)
    refined = {c["grid_frequency"]: 1.0 / c["period"] for c in alias_check}
    warnings: list[str] = []
    if not report.secure and not (alias_check and all(c["settled"] for c in alias_check)):
        warnings.append(report.note if not alias_check else "")
        warnings.extend(c["note"] for c in alias_check if not c["settled"])
    return alias_check, refined, tuple(warnings)


def _pdm_summary(ref: Points, y_main: np.ndarray, frequency: float, cand: _Candidates, reference: str,
                 pdm_bins: int, baseline: float) -> dict[str, Any]:
    """Step 12: PDM's part of the result: its best grid period and theta at the adopted period.

    Takes the reference band's points and magnitudes less the further frequencies,
    the adopted frequency and the PDM search; returns the result's ``pdm`` dict.
    """
    theta_at = float(pdm.pdm_theta(ref.t, y_main, ref.dy, [frequency], n_bins=pdm_bins)[0])
    return {
        "method": "phase dispersion minimisation (Stellingwerf 1978)",
        "band": reference,
        "n_bins": int(pdm_bins),
        "n_covers": 2,
        "evaluated": cand.where,
        "best_period": 1.0 / cand.f_pdm,
        "best_period_note": "grid value, before refinement",
        "best_theta": cand.theta_pdm,
        "theta_at_period": theta_at,
        "relation_to_period": aliases.relate(frequency, cand.f_pdm, baseline_d=baseline),
    }


@blas_threads()  # many small least-squares problems: one BLAS thread is faster (varstar/threads.py)
def analyse(
    t: Any,
    mag: Any,
    mag_err: Any,
    band: Any = None,
    *,
    night: Any = None,
    cal_err: Any = None,
    min_period: float | None = None,
    max_period: float | None = None,
    oversampling: float = 10.0,
    nterms: int = 1,
    harmonics: int | None = None,
    epoch_kind: str | None = None,
    bootstrap: int = 0,
    rng: np.random.Generator | int | None = None,
    single: bool = False,
    snr_limit: float = 4.0,
    fap_limit: float = 1e-3,
    max_frequencies: int = 8,
    pdm_bins: int = 10,
    z_crit: float = 4.0,
) -> PeriodResult:
    """Find, test and refine the period of a light curve; one adopted answer.

    Parameters
    ----------
    t, mag, mag_err : array_like
        Times (BJD_TDB, days), magnitudes and 1-sigma errors; at least 12 points.
    band : array_like, optional
        Band label of each point.  With two or more bands the multi-band
        periodogram is used (one shared frequency, own mean and amplitudes per
        band; VanderPlas & Ivezic 2015) and each band gets its own fit.
    night, cal_err : array_like, optional
        Night label and calibration error (mag) of each point.  The calibration
        error of a night and band is shared by its points: every fit then treats it
        as a covariance (:mod:`.nightly`), so the errors include the nights'
        offsets.  Without them the points are independent.
    min_period, max_period : float, optional
        Search range in days (defaults in :func:`.grid.frequency_grid`: 0.05 d
        to half the baseline).  ``max_period`` longer than the baseline is refused.
    oversampling : float
        Grid points per peak width ``1/T``.
    nterms : int
        Harmonics of the periodogram (1 = the classical generalised Lomb-Scargle).
    harmonics : int, optional
        Harmonics of the final fit of the main signal.  Default: chosen per band by
        Akaike's information criterion among 1 to ``MAX_AUTO_HARMONICS``.
    epoch_kind : {"maximum", "minimum"}, optional
        Which extremum the epoch marks; "minimum" also selects the eclipse
        template for the period.  Default: "minimum" when the light curve repeats
        only at twice the periodogram's period or looks eclipsing (flat maxima,
        dips), else "maximum".
    bootstrap : int
        Number of bootstrap resamples for an empirical FAP (0: none).
    rng : numpy.random.Generator or int, optional
        Random source of the bootstrap (required when ``bootstrap > 0``).
    single : bool
        Fit the main period alone: further significant frequencies are only
        reported as a warning, not put in the model.
    snr_limit, fap_limit, max_frequencies : float, float, int
        A further frequency must reach amplitude S/N ``snr_limit`` (4, Breger et
        al. 1993) and a false-alarm probability of at most ``fap_limit`` (Baluev
        2008) over the grid; at most ``max_frequencies`` in all.
    pdm_bins : int
        PDM bins per cycle.
    z_crit : float
        Threshold of the PDM-versus-periodogram and P-or-2P decisions.

    Returns
    -------
    PeriodResult

    Raises
    ------
    InputError
        Fewer than 12 points, non-finite values, a baseline shorter than
        ``max_period``, bad settings, or a bootstrap without ``rng``.
    ReductionError
        When a fit cannot be made (too few points for the harmonics).
    """
    arrays = as_series(t, mag, mag_err, band, night, cal_err)
    nterms = _check_settings(epoch_kind, nterms, harmonics, bootstrap, rng, max_frequencies)
    s = make_series(*arrays, night)
    # the steps of the module docstring, in order
    pg = compute_periodogram(s, min_period, max_period, oversampling, nterms)
    fap, fap_method, fap_levels, fap_boot = peak_significance(s.t, s.y, s.dy, s.band, pg.freq, pg.p_peak, nterms,
                                                              s.multi, bootstrap, rng)
    report = aliases.alias_report(pg.freq, pg.power, baseline_d=s.baseline)
    ref = s.points(s.band == s.reference)  # PDM, the main signal and further frequencies: the reference band
    cand = _candidates(ref, pg, report, nterms, pdm_bins, z_crit, s.baseline)
    ms = _main_signal(ref, pg.freq, cand.f_cand, pg.f_peak, harmonics, single, snr_limit, fap_limit, max_frequencies)
    ch = _period_choice(ref, ms, harmonics, pdm_bins, z_crit)
    bm = _band_models(s, ms, ch, harmonics, epoch_kind)
    ad = _adopted(s, bm, harmonics, len(ms.others_f))
    alias_check, refined, alias_warnings = _alias_verdict(report, ref, ms, ch.y_main)
    entries, multiperiodic, modes_note = final_frequencies(bm.fits[s.reference], ms.pw, ad.frequency,
                                                           ad.frequency_err, single)
    pdm_summary = _pdm_summary(ref, ch.y_main, ad.frequency, cand, s.reference, pdm_bins, s.baseline)
    warnings = cand.warnings + ms.warnings + ch.warnings + bm.warnings + ad.warnings + alias_warnings
    step = float(pg.freq[1] - pg.freq[0]) if pg.freq.size > 1 else float("nan")
    return PeriodResult(
        period=ad.period, period_err=ad.period_err, frequency=ad.frequency, frequency_err=ad.frequency_err,
        period_method=ad.period_method, errors=_errors_words(s),
        amplitude=ad.amplitude, amplitude_err=ad.amplitude_err,
        epoch=ad.epoch, epoch_err=ad.epoch_err, epoch_kind=bm.kind,
        frequencies=tuple(entries), multiperiodic=multiperiodic, modes_note=modes_note,
        fap=fap, fap_method=fap_method, fap_bootstrap=fap_boot, fap_levels=fap_levels,
        n_points=int(s.t.size), baseline_d=s.baseline, bands=s.bands, reference_band=s.reference,
        method=pg.method, nterms=nterms, harmonics=ad.n_harm,
        grid={"min_period": 1.0 / float(pg.freq[-1]), "max_period": 1.0 / float(pg.freq[0]),
              "oversampling": float(oversampling), "n_frequencies": int(pg.freq.size), "step": step},
        aliases=report, refined_peaks={**ms.refined_peaks, **refined}, pdm=pdm_summary, choice=ch.choice,
        candidates=cand.entries + (ch.entry,), alias_check=tuple(alias_check), fits=bm.fits, templates=bm.templates,
        prewhitening=ms.pw, warnings=tuple(w for w in dict.fromkeys(warnings) if w),
        freq=pg.freq, power=pg.power, theta=cand.theta, others=bm.others,
    )

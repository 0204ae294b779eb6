"""One period analysis of a light curve: every method of the package, combined into one answer.

:func:`analyse` is the pure core behind ``varstar period`` and
:meth:`varstar.archive.Archive.period`.  Steps, each in its own module:

1. a uniform frequency grid from the baseline (:mod:`.grid`);
2. the generalised Lomb-Scargle periodogram (:mod:`.gls`), or for several bands
   the multi-band periodogram with one shared frequency (:mod:`.multiband`);
3. the false-alarm probability of its highest peak (Baluev 2008, :mod:`.significance`),
   and a bootstrap on request;
4. the strongest peaks and their relations to the best one (:mod:`.aliases`);
5. phase dispersion minimisation (Stellingwerf 1978) around the candidates
   (:mod:`.pdm`), whose best period competes with the periodogram's (see below);
6. the main signal's harmonic fit, then a search of the residuals for further
   independent frequencies (:mod:`.prewhiten`: amplitude S/N >= 4, Breger et al.
   1993, and a false-alarm probability <= 0.001 over the grid); found ones are fitted
   together with the main signal and the star is called multi-periodic;
7. P or 2P on the main signal alone, the other frequencies removed (equal-minima
   binaries, :func:`.pdm.choose_p_or_2p`);
8. the adopted period: a harmonic fit with free frequency per band (:mod:`.refine`,
   number of harmonics by AIC) for pulsators, with epoch of maximum light and
   Fourier parameters; for eclipsing binaries (epoch of minimum) a template of the
   star's own folded curve that follows narrow eclipses (:mod:`.template`).

Errors: every fit is weighted least squares with the covariance scaled by the
reduced chi-square; when the nights' calibration errors are given (``night`` and
``cal_err``), each night's error is a covariance shared by its points
(:mod:`.nightly`), so the nights' offsets are in every error.

Choosing between the periodogram's and PDM's best frequencies (step 5): a
sinusoid periodogram of a detached eclipsing binary with narrow eclipses peaks at
a harmonic of the orbital frequency or elsewhere, while PDM, which folds without a
model, finds the orbit.  The two candidates are compared by how well each point is
predicted by its neighbours in phase (leave-one-out, model-free, the statistic of
:func:`.pdm.choose_p_or_2p`); PDM's candidate replaces the periodogram's only when
its prediction is better by more than ``z_crit`` standard errors.  This rule is
this module's own (no published threshold); the simulations in the tests measure
it.
"""


from __future__ import annotations

import math
from typing import Any

import numpy as np

from varstar.errors import InputError, VarstarError
from varstar.results import json_float
from varstar.period import (
    aliases,
    gls,
    grid,
    multiband,
    pdm,
    prewhiten,
    refine,
    significance,
)
from varstar.period.nightly import nightly_whitener
from varstar.period.refine import MAX_AUTO_HARMONICS
from varstar.period.result import PROBABILITY_FLOOR, PeriodResult, format_probability
from varstar.period.sinusoids import fit_sinusoids, model_jacobian
from varstar.threads import blas_threads

__all__ = ["FAP_LEVELS", "MAX_PDM_ELEMENTS", "PROBABILITY_FLOOR", "PeriodResult", "analyse", "format_probability"]

#: Above this many (points x frequencies) PDM is evaluated only around the
#: strongest periodogram peaks and PDM's own coarse minima (the whole grid at the
#: budget is under a second of work on one core; ``benchmarks/bench_period.py --kernels``).
MAX_PDM_ELEMENTS = pdm.DEFAULT_BUDGET

#: False-alarm probabilities whose power levels are reported and drawn.
FAP_LEVELS = (0.1, 0.01, 0.001)

#: Period ratios (shorter / longer) of double-mode pulsators named when a found pair
#: matches within the tolerance.  Values "from memory" (common practice): the
#: first-overtone to fundamental ratio of double-mode RR Lyrae-type stars about 0.745
#: (also in REFERENCES.md), of double-mode classical Cepheids about 0.70-0.72, of
#: double-mode high-amplitude delta Scuti stars about 0.77.
KNOWN_RATIOS = (
    (0.745, 0.008, "the first-overtone to fundamental ratio of double-mode RR Lyrae-type pulsators (about 0.745, from memory)"),
    (0.71, 0.012, "the first-overtone to fundamental ratio of double-mode Cepheids (about 0.70-0.72, from memory)"),
    (0.773, 0.008, "the first-overtone to fundamental ratio of double-mode delta Scuti stars (about 0.77, from memory)"),
)


def _as_series(t: Any, y: Any, dy: Any, band: Any, night: Any, cal_err: Any):
    """Checked, time-sorted arrays; ``night``/``cal_err`` become per-point group keys and errors."""
    t = np.asarray(t, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    dy = np.broadcast_to(np.asarray(dy, dtype=float), t.shape).copy()
    if y.shape != t.shape:
        raise InputError(f"period analysis: {t.size} times but {y.size} magnitudes")
    band = np.full(t.size, "", dtype=object) if band is None else np.asarray(band, dtype=object).ravel()
    if band.shape != t.shape:
        raise InputError(f"period analysis: {t.size} times but {band.size} band labels")
    if t.size == 0:
        raise InputError("period analysis: the light curve is empty (no good points in the chosen band)")
    if t.size < grid.MIN_POINTS:
        raise InputError(
            f"period analysis: {t.size} points are too few; at least {grid.MIN_POINTS} are needed"
        )
    bad = ~(np.isfinite(t) & np.isfinite(y) & np.isfinite(dy) & (dy > 0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"period analysis: point {i} has a non-finite time or magnitude or a non-positive error "
            f"(t={t[i]!r}, mag={y[i]!r}, err={dy[i]!r})"
        )
    group = group_err = None
    if night is not None:
        night = np.asarray(night, dtype=object).ravel()
        if night.shape != t.shape:
            raise InputError(f"period analysis: {t.size} times but {night.size} night labels")
        group = np.array([f"{n}|{b}" for n, b in zip(night, band)], dtype=object)
        group_err = np.zeros(t.size) if cal_err is None else np.broadcast_to(np.asarray(cal_err, dtype=float), t.shape)
        group_err = np.where(np.isfinite(group_err) & (group_err > 0), group_err, 0.0)
    order = np.argsort(t, kind="stable")
    pick = (lambda a: None if a is None else a[order])  # noqa: E731
    return t[order], y[order], dy[order], band[order], pick(group), pick(group_err)


def _multiband_bootstrap(t, y, dy, band, freq, nterms, n_boot, rng, peak) -> float:
    """Bootstrap FAP for the multi-band periodogram: resample (mag, err) pairs within each band.

    The single-band :func:`.significance.fap_bootstrap` resamples across all
    points, which would mix bands of different mean magnitude; here each band
    keeps its own values.  Batches of resamples go through one periodogram call.
    """
    labels = np.unique(band)
    idx_by_band = [np.flatnonzero(band == b) for b in labels]
    maxima = np.empty(n_boot)
    batch = max(1, min(n_boot, 2_000_000 // max(1, freq.size)))
    for start in range(0, n_boot, batch):
        k = min(batch, n_boot - start)
        take = np.empty((k, t.size), dtype=int)
        for idx in idx_by_band:
            take[:, idx] = idx[rng.integers(0, idx.size, size=(k, idx.size))]
        p = multiband.multiband_power(t, y[take], dy[take], band, freq, nterms=nterms)
        maxima[start : start + k] = np.max(np.atleast_2d(p), axis=1)
    # (1 + count) / (1 + n): never zero, as usual for a Monte-Carlo p-value (common practice)
    return float((1 + np.sum(maxima >= peak)) / (1 + n_boot))


def _span_words(baseline: float, night: Any) -> str:
    n_nights = np.unique(np.asarray(night, dtype=str)).size if night is not None else None
    return f"{baseline:.2f} d" + (f" ({n_nights} night{'s' if n_nights != 1 else ''})" if n_nights else "")


def _check_constrained(period: float, period_err: float, baseline: float, night: Any) -> None:
    """Refuse an adopted period the data cannot support: longer than the light curve, or without an error.

    A period is measured only when at least one whole cycle is observed (common
    practice); a fit that runs beyond that, or whose covariance gives no finite
    error, has no answer to report, and a script must not read one.
    """
    span = _span_words(baseline, night)
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


#: Chi-square excess (in units scaled by the best fit's reduced chi2) above which the harmonic
#: fit at a rival alias is taken as clearly worse: 25 is "5 sigma" for models with equal numbers
#: of parameters (common practice, no published threshold).
ALIAS_DCHI2 = 25.0


def _check_rivals(report, t, y, dy, best: refine.HarmonicFit, group=None, group_err=None) -> list[dict[str, Any]]:
    """Fit the main signal's model at each insecure rival peak and compare chi-squares.

    The periodogram's power ratio compares sinusoids; an observer's question is whether
    the light curve, with all its harmonics, fits the alias as well.  ``best`` is the
    fit at the periodogram's chosen peak, on the same data.
    """
    out = []
    if report.secure:
        return out
    for p in report.peaks[1:]:
        if p.power_ratio < report.secure_ratio or p.relation == "same peak":
            continue
        try:
            rival = refine.fit_harmonics(t, y, dy, p.frequency, nterms=best.nterms, group=group, group_err=group_err)
        except VarstarError:
            continue
        d = (rival.chi2 - best.chi2) / max(best.reduced_chi2, 1e-300)
        settled = bool(d > ALIAS_DCHI2)
        out.append({
            "period": rival.period, "grid_frequency": p.frequency, "relation": p.relation,
            "source": "rival periodogram peak (refined)", "delta_chi2": d, "settled": settled,
            "note": (f"the {p.relation} at P={rival.period:.6g} d fits the light curve worse by chi2 {d:.0f} "
                     f"(with {best.nterms} harmonics): the adopted period is preferred" if settled else
                     f"the {p.relation} at P={rival.period:.6g} d fits the light curve nearly as well (chi2 worse by "
                     f"only {d:.1f}): the choice between them is not secure; more nights spread in time would decide"),
        })
    return out


def _cv_z(t, y, dy, f_new: float, f_old: float, m: int = 5) -> float:
    """How much better (in standard errors) phase neighbours predict the points at f_new than at f_old."""
    w = 1.0 / dy**2
    tt = t - t.min()
    e_old = pdm.loo_errors(tt, y, w, f_old, m)
    e_new = pdm.loo_errors(tt, y, w, f_new, m)
    return float(pdm.paired_z(w * (e_old**2 - e_new**2), f_new * tt, m))


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


def _modes_note(frequencies: list[dict[str, Any]]) -> tuple[bool, str]:
    """Whether further independent frequencies exist, and the modes in words."""
    independent = [f for f in frequencies[1:] if not f["relation"]]
    nightly = [f for f in frequencies[1:] if prewhiten.SYSTEMATICS in f["relation"]]
    n_comb = len(frequencies) - 1 - len(independent) - len(nightly)
    notes = []
    if n_comb:
        notes.append(f"{n_comb} further frequenc{'y is a combination' if n_comb == 1 else 'ies are combinations'} "
                     "of the modes")
    if nightly:
        notes.append(
            f"{len(nightly)} at whole cycles per day and year ({', '.join(f['relation'].split(' (')[0] for f in nightly)}), "
            "where errors that follow the night (extinction, airmass) appear: fitted, not counted as modes"
        )
    if not independent:
        return False, "; ".join(["single period", *notes])
    f1 = frequencies[0]
    parts = []
    for f in independent:
        lo, hi = sorted((f1["period"], f["period"]))
        ratio = lo / hi
        match = next((text for r, tol, text in KNOWN_RATIOS if abs(ratio - r) <= tol), None)
        parts.append(
            f"{f['label']} at P = {f['period']:.7g} d (amplitude {f['amplitude']:.3g} mag, S/N {f['snr']:.1f}); "
            f"period ratio {ratio:.4f}" + (f", which matches {match}" if match else "")
        )
    return True, "; ".join([f"multi-periodic: besides f1 (P = {f1['period']:.7g} d), " + "; ".join(parts), *notes])


def _frequency_entry(label, f, f_err, amp, amp_err, snr, relation) -> dict[str, Any]:
    return {
        "label": label, "frequency": json_float(f), "frequency_err": json_float(f_err),
        "period": json_float(1.0 / f), "period_err": json_float(f_err / f**2),
        "amplitude": json_float(amp), "amplitude_err": json_float(amp_err), "snr": json_float(snr), "relation": relation,
    }


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


def _refuse_edge_peak(i_best: int, freq: np.ndarray, baseline: float, night: Any) -> None:
    """Refuse a periodogram whose highest point is an end of the grid (no peak inside the range)."""
    if i_best not in (0, freq.size - 1):
        return
    f_peak = float(freq[i_best])
    span = _span_words(baseline, night)
    if i_best == 0:
        raise InputError(
            f"period analysis: the periodogram rises to the longest period searched ({1 / f_peak:.4g} d) "
            f"and has no peak inside the range; the light curve spans {span}, which shows periods only up "
            f"to about half its span ({baseline / 2:.3g} d): observe more nights, or search a range the "
            "data allow with --min-period/--max-period"
        )
    raise InputError(
        f"period analysis: the periodogram rises to the shortest period searched ({1 / f_peak:.4g} d) and "
        f"has no peak inside the range: give a smaller --min-period"
    )


def _significance(t, y, dy, band, freq, p_peak, nterms, multi, bootstrap, rng):
    """False-alarm probability of the highest peak, its method, the power levels of FAP_LEVELS and
    the bootstrap value (NaN without a bootstrap).

    Baluev's formula is for one series; with several bands it is applied to all points with the
    multi-band power, an approximation (the bootstrap is exact in law).
    """
    fap = float(significance.fap_baluev(p_peak, freq, t, dy, nterms=nterms))
    fap_method = "Baluev (2008) approximation" + (" applied to the multi-band power" if multi else "")
    levels = significance.power_at_fap(np.array(FAP_LEVELS), freq, t, dy, nterms=nterms)
    fap_levels = {lev: float(p) for lev, p in zip(FAP_LEVELS, np.atleast_1d(levels))}
    fap_boot = float("nan")
    if bootstrap:
        gen = np.random.default_rng(rng)
        if multi:
            fap_boot = _multiband_bootstrap(t, y, dy, band, freq, nterms, int(bootstrap), gen, p_peak)
        else:
            fap_boot = float(significance.fap_bootstrap(t, y, dy, freq, nterms=nterms, n_bootstrap=int(bootstrap),
                                                        rng=gen, power=p_peak)[0])
    return fap, fap_method, fap_levels, fap_boot


def _pdm_versus_periodogram(t, y, dy, f_peak, f_pdm, theta_pdm, baseline, z_crit, candidates, warnings) -> float:
    """The candidate frequency: PDM's when phase neighbours predict the points clearly better there.

    Appends PDM's candidate (when it is not the periodogram's peak) to ``candidates`` and a
    warning when it is adopted (see the module docstring).
    """
    rel = aliases.relate(f_peak, f_pdm, baseline_d=baseline)
    if rel == "same peak":
        return f_peak
    z = _cv_z(t, y, dy, f_pdm, f_peak)
    adopt = z > z_crit
    candidates.append({
        "period": 1.0 / f_pdm, "source": "PDM minimum (grid value)", "theta": theta_pdm,
        "relation_to_periodogram_peak": rel, "z": z,
        "note": (f"phase neighbours predict the points better at PDM's period (z = {z:.1f} > {z_crit:g}); "
                 "this candidate was refined and adopted"
                 if adopt else f"rejected: not better supported by the phased curve than the periodogram "
                 f"peak (z = {z:.1f} <= {z_crit:g})"),
    })
    if not adopt:
        return f_peak
    warnings.append(
        f"PDM's period {1 / f_pdm:.6g} d ({rel} of the periodogram's {1 / f_peak:.6g} d) fits the phased "
        f"curve better (z = {z:.1f}) and is adopted; a sinusoid describes this light curve poorly"
    )
    return f_pdm


def _rival_2p(choice: pdm.PeriodChoice, z_crit: float) -> dict[str, Any]:
    """The candidate entry of the rejected one of P and 2P."""
    return {
        "period": (1.0 if choice.factor == 2 else 2.0) / choice.frequency,
        "source": "the rejected one of P and 2P",
        "z": choice.z,
        "note": (f"rejected: the two halves of the {2.0 / choice.frequency:.6g} d cycle differ (z = {choice.z:.1f})"
                 if choice.factor == 2 else
                 f"rejected: the two halves of this cycle agree within the noise (z = {choice.z:.1f} <= {z_crit:g}); "
                 "for an eclipsing binary with equal minima the orbital period may still be this one"),
    }


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
    t, y, dy, band, group, group_err = _as_series(t, mag, mag_err, band, night, cal_err)
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
    labels, counts = np.unique(band, return_counts=True)
    bands = tuple(str(b) for b in labels)
    multi = len(bands) > 1
    reference = bands[int(np.argmax(counts))]
    warnings: list[str] = []
    nightly = group is not None and bool(np.any(group_err > 0))
    errors = ("each night's calibration error (cal_err) is shared by its points: generalised least squares, "
              "as a per-night offset with that prior; covariance scaled by the reduced chi-square"
              if nightly else "points independent with their errors; covariance scaled by the reduced chi-square")

    def sel(mask):  # the group keys and errors of a subset
        return (None, None) if group is None else (group[mask], group_err[mask])

    freq = grid.frequency_grid(t, min_period=min_period, max_period=max_period, oversampling=oversampling)
    baseline = float(t[-1] - t[0])
    if multi:
        power = multiband.multiband_power(t, y, dy, band, freq, nterms=nterms)
        method = f"multi-band generalised Lomb-Scargle ({nterms} harmonic{'s' if nterms > 1 else ''}, bands {', '.join(bands)})"
    else:
        power = gls.gls_power(t, y, dy, freq, nterms=nterms)
        method = f"generalised Lomb-Scargle ({nterms} harmonic{'s' if nterms > 1 else ''})"
    i_best = int(np.nanargmax(power))
    f_peak, p_peak = float(freq[i_best]), float(power[i_best])
    _refuse_edge_peak(i_best, freq, baseline, night)
    fap, fap_method, fap_levels, fap_boot = _significance(t, y, dy, band, freq, p_peak, nterms, multi, bootstrap, rng)

    report = aliases.alias_report(freq, power, baseline_d=baseline)

    # The second method, on the reference band.
    rb = band == reference
    tr, yr, dyr = t[rb], y[rb], dy[rb]
    gr, ger = sel(rb)
    theta, where = pdm.pdm_search(tr, yr, dyr, freq, [p.frequency for p in report.peaks], n_bins=pdm_bins,
                                  budget=MAX_PDM_ELEMENTS)
    j_pdm = int(np.nanargmin(theta))
    f_pdm = float(freq[j_pdm])

    candidates: list[dict[str, Any]] = [{
        "period": 1.0 / f_peak, "source": "periodogram peak (grid value, before refinement)", "power": p_peak,
    }]
    f_cand = _pdm_versus_periodogram(tr, yr, dyr, f_peak, f_pdm, float(theta[j_pdm]), baseline, z_crit,
                                     candidates, warnings)
    if nterms > 1:
        # A multi-harmonic periodogram has as much power at half the frequency (its harmonics
        # include f): keep the longer period only if the phased curve needs it.
        half = pdm.choose_p_or_2p(tr, yr, dyr, 2.0 * f_cand, n_bins=pdm_bins, z_crit=z_crit)
        if half.factor == 1:
            candidates.append({"period": 2.0 / half.frequency, "source": "multi-harmonic periodogram peak",
                               "note": "the phased curve repeats at half this period; the half was taken"})
            f_cand = half.frequency

    # The main signal, then further frequencies in its residuals (reference band).
    top = int(harmonics) if harmonics is not None else MAX_AUTO_HARMONICS
    if harmonics is None:
        main = refine.fit_harmonics_aic(tr, yr, dyr, f_cand, max_nterms=top, group=gr, group_err=ger)
    else:
        main = refine.fit_harmonics(tr, yr, dyr, f_cand, nterms=top, group=gr, group_err=ger)
    refined_peaks = {f_peak: main.frequency} if f_cand == f_peak else {}
    pw = prewhiten.prewhiten(
        tr, yr, dyr, freq, lambda tt, yy, ee, ff: gls.gls_power(tt, yy, ee, ff, nterms=1),
        first=main.frequency, first_nterms=main.nterms, group=gr, group_err=ger,
        snr_limit=snr_limit, fap_limit=fap_limit, max_frequencies=2 if single else int(max_frequencies),
        alias_trials=True,
    )
    found = pw.frequencies[1:]
    others_f = [] if single else [f.frequency for f in found]
    if single and found and not found[0].relation:
        warnings.append(
            f"a further significant frequency remains in the residuals at P = {found[0].period:.7g} d "
            f"(amplitude S/N {found[0].snr:.1f}): the star is probably multi-periodic; run without --single"
        )

    # P or 2P on the main signal alone: a second mode must not make the halves of 2P differ.
    others_ref = None
    if others_f:
        others_ref = _others_in_band(tr, yr, dyr, main.t_ref, main.frequency, main.nterms, others_f, gr, ger)
    y_main_r = yr if others_ref is None else yr - others_ref(tr)
    # ... nor may the nights' calibration offsets (cycle parity often goes with the night):
    # the fold is judged with each night's estimated offset removed.
    whiten_r = nightly_whitener(dyr, gr, ger)
    resid_r = y_main_r - main.model(tr)
    y_fold = y_main_r + (whiten_r.without_offsets(resid_r) - resid_r)  # y minus each night's offset
    choice = pdm.choose_p_or_2p(tr, y_fold, dyr, main.frequency, n_bins=pdm_bins, z_crit=z_crit)
    f_final = choice.frequency / choice.factor
    candidates.append(_rival_2p(choice, z_crit))
    min_harm = 2 if choice.factor == 2 else 1  # a curve repeating only after 2P needs its 2nd harmonic
    if harmonics is not None and int(harmonics) < min_harm:
        warnings.append("the light curve repeats only after 2P: the fit uses 2 harmonics to show both halves")

    # The adopted model per band: main signal (harmonic series or eclipse template) + others.
    fits: dict[str, refine.HarmonicFit] = {}
    others: dict[str, Any] = {}
    k_joint = min(MAX_AUTO_HARMONICS, main.nterms * choice.factor)
    for b in bands:
        m = band == b
        tb, yb, dyb = t[m], y[m], dy[m]
        gb, geb = sel(m)
        if others_f:
            w = 1.0 / dyb**2
            others[b] = _others_in_band(tb, yb, dyb, float(np.sum(w * tb) / np.sum(w)), f_final, k_joint,
                                        others_f, gb, geb)
            yb = yb - others[b](tb)
        if harmonics is None:
            fits[b] = refine.fit_harmonics_aic(tb, yb, dyb, f_final, min_nterms=min_harm, group=gb, group_err=geb)
        else:
            fits[b] = refine.fit_harmonics(tb, yb, dyb, f_final, nterms=max(int(harmonics), min_harm),
                                           group=gb, group_err=geb)
        warnings.extend(f"{b}: {w}" if multi else w for w in fits[b].warnings)
    kind = epoch_kind or ("minimum" if choice.factor == 2 or _eclipse_like(fits[reference]) else "maximum")

    templates: dict[str, Any] = {}
    if kind == "minimum":
        from varstar.period import template

        for b in bands:
            m = band == b
            gb, geb = sel(m)
            yb = y[m] - (others[b](t[m]) if b in others else 0.0)
            templates[b] = template.fit_template_period(t[m], yb, dy[m], fits[b].frequency, group=gb, group_err=geb)
    n_harm = fits[reference].nterms
    frequency, frequency_err = _combine_bands(templates or fits, bands, reference, warnings)
    period = 1.0 / frequency
    period_err = frequency_err / frequency**2
    _check_constrained(period, period_err, baseline, night)
    ref = fits[reference]
    if templates:
        tpl = templates[reference]
        epoch, epoch_err = tpl.epoch_min_light, tpl.epoch_min_light_err
        amplitude, amplitude_err = tpl.ptp_amplitude, float("nan")
        period_method = f"eclipse template: {tpl.method}"
    else:
        amplitude, amplitude_err = ref.ptp_amplitude, ref.ptp_amplitude_err
        if kind == "maximum":
            epoch, epoch_err = ref.epoch_max_light, ref.epoch_max_light_err
        else:
            epoch, epoch_err = ref.epoch_min_light, ref.epoch_min_light_err
        period_method = f"harmonic fit with free frequency ({n_harm} harmonics, {'set' if harmonics else 'chosen by AIC'})"
    if multi:
        period_method += f"; bands {', '.join(bands)} combined by inverse-variance weighting"
    if others_f:
        period_method += f"; fitted together with {len(others_f)} further frequenc{'y' if len(others_f) == 1 else 'ies'}"

    best = main if others_ref is None else refine.fit_harmonics(tr, y_main_r, dyr, main.frequency,
                                                                nterms=main.nterms, group=gr, group_err=ger)
    alias_check = _check_rivals(report, tr, y_main_r, dyr, best, gr, ger)
    for c in alias_check:
        refined_peaks[c["grid_frequency"]] = 1.0 / c["period"]
    if not report.secure and not (alias_check and all(c["settled"] for c in alias_check)):
        warnings.append(report.note if not alias_check else "")
        warnings.extend(c["note"] for c in alias_check if not c["settled"])

    # Frequencies of the final model, main first (its error is the adopted one).
    amp1 = fits[reference].amplitudes[0]
    amp1_err = fits[reference].amplitude_errs[0]
    first = pw.frequencies[0]
    snr1 = first.snr * (amp1 / first.amplitude if first.amplitude > 0 else 1.0)
    entries = [_frequency_entry("f1", frequency, frequency_err, amp1, amp1_err, snr1, "")]
    if not single:
        entries += [_frequency_entry(f.label, f.frequency, f.frequency_err, f.amplitude, f.amplitude_err, f.snr,
                                     f.relation) for f in found]
    multiperiodic, modes_note = _modes_note(entries)

    theta_at = float(pdm.pdm_theta(tr, y_main_r, dyr, [frequency], n_bins=pdm_bins)[0])
    pdm_summary = {
        "method": "phase dispersion minimisation (Stellingwerf 1978)",
        "band": reference,
        "n_bins": int(pdm_bins),
        "n_covers": 2,
        "evaluated": where,
        "best_period": 1.0 / f_pdm,
        "best_period_note": "grid value, before refinement",
        "best_theta": float(theta[j_pdm]),
        "theta_at_period": theta_at,
        "relation_to_period": aliases.relate(frequency, f_pdm, baseline_d=baseline),
    }

    step = float(freq[1] - freq[0]) if freq.size > 1 else float("nan")
    return PeriodResult(
        period=period, period_err=period_err, frequency=frequency, frequency_err=frequency_err,
        period_method=period_method, errors=errors,
        amplitude=amplitude, amplitude_err=amplitude_err,
        epoch=float(epoch), epoch_err=float(epoch_err), epoch_kind=kind,
        frequencies=tuple(entries), multiperiodic=multiperiodic, modes_note=modes_note,
        fap=fap, fap_method=fap_method, fap_bootstrap=fap_boot, fap_levels=fap_levels,
        n_points=int(t.size), baseline_d=baseline, bands=bands, reference_band=reference,
        method=method, nterms=nterms, harmonics=n_harm,
        grid={"min_period": 1.0 / float(freq[-1]), "max_period": 1.0 / float(freq[0]),
              "oversampling": float(oversampling), "n_frequencies": int(freq.size), "step": step},
        aliases=report, refined_peaks=refined_peaks, pdm=pdm_summary, choice=choice,
        candidates=tuple(candidates), alias_check=tuple(alias_check), fits=fits, templates=templates,
        prewhitening=pw, warnings=tuple(w for w in dict.fromkeys(warnings) if w),
        freq=freq, power=power, theta=theta, others=others,
    )

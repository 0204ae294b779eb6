"""One period analysis of a light curve: every method of the package, combined.

:func:`analyse` is the pure core behind ``varstar period`` and
:meth:`varstar.archive.Archive.period`.  Steps, each in its own module:

1. a uniform frequency grid from the baseline (:mod:`.grid`);
2. the generalised Lomb-Scargle periodogram (:mod:`.gls`), or for several bands
   the multi-band periodogram with one shared frequency (:mod:`.multiband`);
3. the false-alarm probability of its highest peak (Baluev 2008, :mod:`.significance`),
   and a bootstrap on request;
4. the strongest peaks and their relations to the best one (:mod:`.aliases`);
5. phase dispersion minimisation (Stellingwerf 1978) on the same grid (:mod:`.pdm`),
   whose best period competes with the periodogram's (see below);
6. P or 2P: whether the phased curve repeats at the chosen period or only at twice
   it (equal-minima binaries, :func:`.pdm.choose_p_or_2p`);
7. the harmonic fit with free frequency per band (:mod:`.refine`): period, epoch,
   amplitude and Fourier parameters with errors;
8. optionally iterative prewhitening (:mod:`.prewhiten`).

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
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from varstar.errors import InputError, VarstarError
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
from varstar.period.refine import _jf

__all__ = ["MAX_PDM_ELEMENTS", "PeriodResult", "analyse"]

#: Above this many (points x frequencies) PDM is evaluated only around the
#: strongest periodogram peaks and PDM's own coarse minimum (about 5 s of work
#: on one core; measured with ``benchmarks/bench_period.py``'s sampling).
MAX_PDM_ELEMENTS = 400_000_000

#: Largest number of harmonics the automatic choice tries.
MAX_AUTO_HARMONICS = 10

#: False-alarm probabilities whose power levels are reported and drawn.
FAP_LEVELS = (0.1, 0.01, 0.001)


@dataclass(frozen=True, eq=False)
class PeriodResult:
    """The outcome of one period analysis.

    Attributes
    ----------
    period, period_err : float
        Adopted period (days) and its 1-sigma error.  With several bands the
        per-band fitted frequencies are combined by inverse-variance weighting.
    frequency, frequency_err : float
        ``1/period`` (cycles/day) and its error.
    amplitude, amplitude_err : float
        Peak-to-peak amplitude (mag) of the harmonic fit of the reference band.
    epoch, epoch_err, epoch_kind : float, float, str
        BJD_TDB of maximum light (``epoch_kind="maximum"``) or minimum light
        (``"minimum"``) of the reference band's fit, nearest the data's weighted
        mean time.
    fap, fap_method : float, str
        False-alarm probability of the highest periodogram peak and how it was
        computed; ``fap_bootstrap`` is the bootstrap value when asked for (else NaN).
    fap_levels : dict
        Periodogram power needed for the probabilities in :data:`FAP_LEVELS`.
    n_points, baseline_days : int, float
    bands : tuple of str
        Bands used; ``reference_band`` is the one whose fit gives amplitude and epoch.
    method, nterms, harmonics : str, int, int
        Periodogram used, its harmonics, and the harmonics of the final fit.
    grid : dict
        ``min_period``, ``max_period``, ``oversampling``, ``n_frequencies``, ``step``.
    aliases : AliasReport
    pdm : dict
        The second method's best period, its theta, theta at the adopted period,
        and where it was evaluated.
    choice : PeriodChoice
        The P-or-2P verdict on the candidate frequency.
    alias_check : tuple of dict
        For each rival peak that made the periodogram's choice insecure: the harmonic
        fit's chi-square excess there and whether that settles the choice.
    candidates : tuple of dict
        Periods considered (periodogram peak, PDM minimum, P and 2P) with notes.
    fits : dict of str to HarmonicFit
    prewhitening : PrewhiteningResult or None
    warnings : tuple of str
    freq, power, theta : numpy.ndarray
        The grid, the periodogram and PDM's theta (NaN where not evaluated), for
        plots; not part of :meth:`to_dict`.
    """

    period: float
    period_err: float
    frequency: float
    frequency_err: float
    amplitude: float
    amplitude_err: float
    epoch: float
    epoch_err: float
    epoch_kind: str
    fap: float
    fap_method: str
    fap_bootstrap: float
    fap_levels: dict[float, float]
    n_points: int
    baseline_days: float
    bands: tuple[str, ...]
    reference_band: str
    method: str
    nterms: int
    harmonics: int
    grid: dict[str, Any]
    aliases: aliases.AliasReport
    pdm: dict[str, Any]
    choice: pdm.PeriodChoice
    candidates: tuple[dict[str, Any], ...]
    alias_check: tuple[dict[str, Any], ...]
    fits: dict[str, refine.HarmonicFit]
    prewhitening: prewhiten.PrewhiteningResult | None
    warnings: tuple[str, ...]
    freq: np.ndarray = field(repr=False)
    power: np.ndarray = field(repr=False)
    theta: np.ndarray = field(repr=False)

    def model(self, t: Any, band: str) -> np.ndarray:
        """The fitted model of ``band`` at times ``t``."""
        return self.fits[band].model(t)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict: what ``varstar period --json`` prints and the archive stores."""
        if self.prewhitening is not None:
            frequencies = [f.to_dict() for f in self.prewhitening.frequencies]
        else:
            frequencies = [
                {
                    "label": "f1",
                    "frequency": _jf(self.frequency),
                    "frequency_err": _jf(self.frequency_err),
                    "period": _jf(self.period),
                    "period_err": _jf(self.period_err),
                    "amplitude": _jf(self.amplitude),
                }
            ]
        return {
            "period": _jf(self.period),
            "period_err": _jf(self.period_err),
            "frequency": _jf(self.frequency),
            "frequency_err": _jf(self.frequency_err),
            "amplitude": _jf(self.amplitude),
            "amplitude_err": _jf(self.amplitude_err),
            "epoch": _jf(self.epoch),
            "epoch_err": _jf(self.epoch_err),
            "epoch_kind": self.epoch_kind,
            "time_system": "BJD_TDB",
            "fap": _jf(self.fap),
            "fap_method": self.fap_method,
            "fap_bootstrap": _jf(self.fap_bootstrap),
            "fap_levels": [{"fap": k, "power": _jf(v)} for k, v in sorted(self.fap_levels.items())],
            "n_points": int(self.n_points),
            "baseline_days": _jf(self.baseline_days),
            "bands": list(self.bands),
            "reference_band": self.reference_band,
            "method": self.method,
            "nterms": int(self.nterms),
            "harmonics": int(self.harmonics),
            "grid": dict(self.grid),
            "aliases": [
                {"period": _jf(p.period), "frequency": _jf(p.frequency), "power": _jf(p.power),
                 "power_ratio": _jf(p.power_ratio), "relation": p.relation}
                for p in self.aliases.peaks
            ],
            "alias_secure": bool(self.aliases.secure or (self.alias_check and all(c["settled"] for c in self.alias_check))),
            "alias_note": self.aliases.note,
            "alias_check": [dict(c) for c in self.alias_check],
            "pdm": dict(self.pdm),
            "period_choice": self.choice.to_dict(),
            "candidates": [dict(c) for c in self.candidates],
            "fits": {b: f.to_dict() for b, f in self.fits.items()},
            "frequencies": frequencies,
            "prewhitening": None if self.prewhitening is None else self.prewhitening.to_dict(),
            "warnings": list(self.warnings),
        }


def _as_series(t: Any, y: Any, dy: Any, band: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
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
    order = np.argsort(t, kind="stable")
    return t[order], y[order], dy[order], band[order]


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


def _pdm_on_grid(t, y, dy, freq, peaks_idx, n_bins) -> tuple[np.ndarray, str]:
    """PDM theta on the whole grid, or on windows around candidate peaks when that is too costly."""
    if t.size * freq.size <= MAX_PDM_ELEMENTS:
        return pdm.pdm_theta(t, y, dy, freq, n_bins=n_bins), "whole grid"
    theta = np.full(freq.size, np.nan)
    # A coarse pass (every k-th frequency) locates PDM's own broad minima, then windows of
    # +-3 steps around them and around the periodogram's peaks, their halves and doubles.
    k = int(math.ceil(t.size * freq.size / (MAX_PDM_ELEMENTS / 2)))
    coarse = np.arange(0, freq.size, k)
    theta[coarse] = pdm.pdm_theta(t, y, dy, freq[coarse], n_bins=n_bins)
    best_coarse = coarse[np.argsort(np.nan_to_num(theta[coarse], nan=np.inf))[:10]]
    df = freq[1] - freq[0] if freq.size > 1 else 1.0
    centres = [freq[i] * s for i in peaks_idx for s in (1.0, 0.5, 2.0)] + list(freq[best_coarse])
    window = set()
    for c in centres:
        j = int(round((c - freq[0]) / df))
        window.update(range(max(0, j - max(3, k)), min(freq.size, j + max(3, k) + 1)))
    w = np.array(sorted(window), dtype=int)
    theta[w] = pdm.pdm_theta(t, y, dy, freq[w], n_bins=n_bins)
    return theta, f"coarse pass every {k} frequencies, then near the strongest periodogram peaks and PDM minima"


def _fit_by_aic(t, y, dy, f, min_harm: int) -> refine.HarmonicFit:
    """Harmonic fit whose number of harmonics minimises AIC = chi2 + 2 k (Akaike 1974).

    AIC rather than BIC (chi2 + k ln N): one harmonic too few biases the epoch of an
    asymmetric curve (measured on simulations in the tests: with BIC, epoch pulls had a
    spread of 1.5 when it dropped a small fifth harmonic; with AIC 1.07), while one too
    many costs only a little precision.  Stops once AIC has risen for two harmonics in a row.
    """
    best, best_aic, worse = None, np.inf, 0
    top = min(MAX_AUTO_HARMONICS, (t.size - 3) // 2)
    for k in range(min_harm, max(min_harm, top) + 1):
        fit = refine.fit_harmonics(t, y, dy, f, nterms=k)
        aic = fit.chi2 + 2.0 * (2 * k + 2)
        if aic < best_aic:
            best, best_aic, worse = fit, aic, 0
        else:
            worse += 1
            if worse >= 2:
                break
    return best


#: Chi-square excess (in units scaled by the best fit's reduced chi2) above which the harmonic
#: fit at a rival alias is taken as clearly worse: 25 is "5 sigma" for models with equal numbers
#: of parameters (common practice, no published threshold).
ALIAS_DCHI2 = 25.0


def _check_rivals(report, t, y, dy, best: refine.HarmonicFit) -> list[dict[str, Any]]:
    """Fit the final model at each insecure rival peak and compare chi-squares.

    The periodogram's power ratio compares sinusoids; an observer's question is whether
    the light curve, with all its harmonics, fits the alias as well.
    """
    out = []
    if report.secure:
        return out
    for p in report.peaks[1:]:
        if p.power_ratio < report.secure_ratio or p.relation == "same peak":
            continue
        try:
            rival = refine.fit_harmonics(t, y, dy, p.frequency, nterms=best.nterms)
        except VarstarError:
            continue
        d = (rival.chi2 - best.chi2) / max(best.reduced_chi2, 1e-300)
        settled = bool(d > ALIAS_DCHI2)
        out.append({
            "period": rival.period, "relation": p.relation, "delta_chi2": d, "settled": settled,
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
    e_old = pdm._loo_errors(tt, y, w, f_old, m)
    e_new = pdm._loo_errors(tt, y, w, f_new, m)
    return float(pdm._paired_z(w * (e_old**2 - e_new**2), f_new * tt, m))


def analyse(
    t: Any,
    mag: Any,
    mag_err: Any,
    band: Any = None,
    *,
    min_period: float | None = None,
    max_period: float | None = None,
    oversampling: float = 10.0,
    nterms: int = 1,
    harmonics: int | None = None,
    epoch_kind: str | None = None,
    bootstrap: int = 0,
    rng: np.random.Generator | int | None = None,
    prewhitening: bool = False,
    snr_limit: float = 4.0,
    max_frequencies: int = 10,
    pdm_bins: int = 10,
    z_crit: float = 4.0,
) -> PeriodResult:
    """Find, test and refine the period of a light curve.

    Parameters
    ----------
    t, mag, mag_err : array_like
        Times (BJD_TDB, days), magnitudes and 1-sigma errors; at least 12 points.
    band : array_like, optional
        Band label of each point.  With two or more bands the multi-band
        periodogram is used (one shared frequency, own mean and amplitudes per
        band; VanderPlas & Ivezic 2015) and each band gets its own harmonic fit.
    min_period, max_period : float, optional
        Search range in days (defaults in :func:`.grid.frequency_grid`: 0.05 d
        to half the baseline).  ``max_period`` longer than the baseline is refused.
    oversampling : float
        Grid points per peak width ``1/T``.
    nterms : int
        Harmonics of the periodogram (1 = the classical generalised Lomb-Scargle).
    harmonics : int, optional
        Harmonics of the final fit (amplitude, epoch, Fourier parameters).
        Default: chosen per band by Akaike's information criterion among
        1 to :data:`MAX_AUTO_HARMONICS` (Akaike 1974); too few harmonics bias the
        epoch of an asymmetric light curve.
    epoch_kind : {"maximum", "minimum"}, optional
        Which extremum the epoch marks.  Default: "minimum" when the light curve
        repeats only at twice the periodogram's period (a binary), else "maximum".
    bootstrap : int
        Number of bootstrap resamples for an empirical FAP (0: none).
    rng : numpy.random.Generator or int, optional
        Random source of the bootstrap (required when ``bootstrap > 0``).
    prewhitening : bool
        Also run iterative prewhitening on the reference band.
    snr_limit, max_frequencies : float, int
        Prewhitening's stopping S/N (4, Breger et al. 1993) and frequency cap.
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
    t, y, dy, band = _as_series(t, mag, mag_err, band)
    if epoch_kind not in (None, "maximum", "minimum"):
        raise InputError(f"period analysis: epoch_kind must be 'maximum' or 'minimum' (got {epoch_kind!r})")
    nterms = gls.check_nterms(nterms)
    if harmonics is not None and int(harmonics) < 1:
        raise InputError(f"period analysis: harmonics must be at least 1 (got {harmonics})")
    if bootstrap < 0:
        raise InputError(f"period analysis: bootstrap must be 0 or a positive count (got {bootstrap})")
    if bootstrap and rng is None:
        raise InputError("period analysis: a bootstrap needs a random generator or seed (rng)")
    labels, counts = np.unique(band, return_counts=True)
    bands = tuple(str(b) for b in labels)
    multi = len(bands) > 1
    reference = bands[int(np.argmax(counts))]
    warnings: list[str] = []

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

    # Significance.  Baluev's formula is for one series; with several bands it is applied to
    # all points with the multi-band power, an approximation (the bootstrap is exact in law).
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

    report = aliases.alias_report(freq, power, baseline_days=baseline)
    if not report.secure:
        warnings.append(report.note)

    # The second method, on the reference band.
    rb = band == reference
    tr, yr, dyr = t[rb], y[rb], dy[rb]
    peak_idx = [int(np.argmin(np.abs(freq - p.frequency))) for p in report.peaks]
    theta, where = _pdm_on_grid(tr, yr, dyr, freq, peak_idx, pdm_bins)
    j_pdm = int(np.nanargmin(theta))
    f_pdm = float(freq[j_pdm])

    candidates: list[dict[str, Any]] = [
        {"period": 1.0 / f_peak, "source": "periodogram peak", "power": p_peak},
    ]
    f_cand = f_peak
    rel = aliases.relate(f_peak, f_pdm, baseline_days=baseline)
    if rel != "same peak":
        z = _cv_z(tr, yr, dyr, f_pdm, f_peak)
        adopt = z > z_crit
        candidates.append({
            "period": 1.0 / f_pdm, "source": "PDM minimum", "theta": float(theta[j_pdm]),
            "relation_to_periodogram_peak": rel, "z": z,
            "note": ("phase neighbours predict the points better at PDM's period; adopted"
                     if adopt else "not better supported by the phased curve than the periodogram peak"),
        })
        if adopt:
            f_cand = f_pdm
            warnings.append(
                f"PDM's period {1 / f_pdm:.6g} d ({rel} of the periodogram's {1 / f_peak:.6g} d) fits the phased "
                f"curve better (z = {z:.1f}) and is adopted; a sinusoid describes this light curve poorly"
            )
    if nterms > 1:
        # A multi-harmonic periodogram has as much power at half the frequency (its harmonics
        # include f): keep the longer period only if the phased curve needs it.
        half = pdm.choose_p_or_2p(tr, yr, dyr, 2.0 * f_cand, n_bins=pdm_bins, z_crit=z_crit)
        if half.factor == 1:
            candidates.append({"period": half.period, "source": "half the candidate period",
                               "note": "the phased curve repeats at half the multi-harmonic peak's period; adopted"})
            f_cand = half.frequency
    choice = pdm.choose_p_or_2p(tr, yr, dyr, f_cand, n_bins=pdm_bins, z_crit=z_crit)
    candidates.append({"period": 1.0 / choice.frequency, "source": "P (candidate, refined)",
                       "theta": choice.theta_p})
    candidates.append({"period": 2.0 / choice.frequency, "source": "2P", "theta": choice.theta_2p,
                       "note": choice.note})
    f_final = choice.frequency / choice.factor
    kind = epoch_kind or ("minimum" if choice.factor == 2 else "maximum")
    min_harm = 2 if choice.factor == 2 else 1  # a curve repeating only after 2P needs its 2nd harmonic
    if harmonics is not None and int(harmonics) < min_harm:
        warnings.append("the light curve repeats only after 2P: the fit uses 2 harmonics to show both halves")

    fits: dict[str, refine.HarmonicFit] = {}
    for b in bands:
        m = band == b
        if harmonics is None:
            fits[b] = _fit_by_aic(t[m], y[m], dy[m], f_final, min_harm)
        else:
            fits[b] = refine.fit_harmonics(t[m], y[m], dy[m], f_final, nterms=max(int(harmonics), min_harm))
        warnings.extend(f"{b}: {w}" if multi else w for w in fits[b].warnings)
    n_harm = fits[reference].nterms
    f_vals = np.array([fits[b].frequency for b in bands])
    f_errs = np.array([fits[b].frequency_err for b in bands])
    if multi and np.all(np.isfinite(f_errs) & (f_errs > 0)):
        wts = 1.0 / f_errs**2
        frequency = float(np.sum(wts * f_vals) / np.sum(wts))
        frequency_err = float(1.0 / np.sqrt(np.sum(wts)))
        chi2 = float(np.sum(wts * (f_vals - frequency) ** 2))
        if chi2 > len(bands) - 1 + 3 * math.sqrt(2 * (len(bands) - 1)):
            warnings.append(f"the bands' fitted frequencies disagree (chi2 = {chi2:.1f} for {len(bands) - 1} dof)")
    else:
        frequency, frequency_err = float(fits[reference].frequency), float(fits[reference].frequency_err)
    period = 1.0 / frequency
    period_err = frequency_err / frequency**2
    ref = fits[reference]
    if kind == "maximum":
        epoch, epoch_err = ref.epoch_max_light, ref.epoch_max_light_err
    else:
        epoch, epoch_err = ref.epoch_min_light, ref.epoch_min_light_err

    alias_check = _check_rivals(report, tr, yr, dyr, fits[reference])
    if alias_check:
        warnings = [w for w in warnings if w != report.note] + [c["note"] for c in alias_check if not c["settled"]]

    theta_at = float(pdm.pdm_theta(tr, yr, dyr, [frequency], n_bins=pdm_bins)[0])
    pdm_summary = {
        "method": "phase dispersion minimisation (Stellingwerf 1978)",
        "band": reference,
        "n_bins": int(pdm_bins),
        "n_covers": 2,
        "evaluated": where,
        "best_period": 1.0 / f_pdm,
        "best_theta": float(theta[j_pdm]),
        "theta_at_period": theta_at,
        "relation_to_period": aliases.relate(frequency, f_pdm, baseline_days=baseline),
    }

    pw = None
    if prewhitening:
        def periodogram(tt, yy, ee, ff):
            return gls.gls_power(tt, yy, ee, ff, nterms=1)

        # Sinusoids, as in Breger et al. (1993): a non-sinusoidal mode's harmonics come out as
        # frequencies of their own, named by their relation ("2 f1").
        pw = prewhiten.prewhiten(tr, yr, dyr, freq, periodogram, nterms=1, snr_limit=snr_limit,
                                 max_frequencies=max_frequencies)
        warnings.extend(pw.warnings)

    step = float(freq[1] - freq[0]) if freq.size > 1 else float("nan")
    return PeriodResult(
        period=period, period_err=period_err, frequency=frequency, frequency_err=frequency_err,
        amplitude=ref.ptp_amplitude, amplitude_err=ref.ptp_amplitude_err,
        epoch=float(epoch), epoch_err=float(epoch_err), epoch_kind=kind,
        fap=fap, fap_method=fap_method, fap_bootstrap=fap_boot, fap_levels=fap_levels,
        n_points=int(t.size), baseline_days=baseline, bands=bands, reference_band=reference,
        method=method, nterms=nterms, harmonics=n_harm,
        grid={"min_period": 1.0 / float(freq[-1]), "max_period": 1.0 / float(freq[0]),
              "oversampling": float(oversampling), "n_frequencies": int(freq.size), "step": step},
        aliases=report, pdm=pdm_summary, choice=choice, candidates=tuple(candidates), alias_check=tuple(alias_check), fits=fits,
        prewhitening=pw, warnings=tuple(dict.fromkeys(warnings)),
        freq=freq, power=power, theta=theta,
    )

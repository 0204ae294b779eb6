"""Rival periods in a period analysis: which candidate the light curve supports.

Used by :func:`varstar.period.analysis.analyse` wherever two periods compete:

* PDM's best frequency against the periodogram's (:func:`pdm_versus_periodogram`).
  A sinusoid periodogram of a detached eclipsing binary with narrow eclipses
  peaks at a harmonic of the orbital frequency or elsewhere, while PDM, which
  folds without a model, finds the orbit.  The two candidates are compared by how
  well each point is predicted by its neighbours in phase (leave-one-out,
  model-free, the statistic of :func:`.p_or_2p.choose_p_or_2p`; :func:`cv_z`); PDM's
  candidate replaces the periodogram's only when its prediction is better by more
  than ``z_crit`` standard errors.  This rule is the package's own (no published
  threshold); the simulations in the tests measure it.
* The rejected one of P and 2P, as a candidate entry (:func:`rival_2p`).
* Rival alias peaks of an insecure periodogram: the main signal's harmonic model
  fitted at each, chi-squares compared (:func:`check_rivals`, :data:`ALIAS_DCHI2`).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from varstar.errors import VarstarError
from varstar.period import aliases, p_or_2p, pdm, refine

__all__ = ["ALIAS_DCHI2", "check_rivals", "cv_z", "pdm_versus_periodogram", "rival_2p"]


#: Chi-square excess (in units scaled by the best fit's reduced chi2) above which the harmonic
#: fit at a rival alias is taken as clearly worse: 25 is "5 sigma" for models with equal numbers
#: of parameters (common practice, no published threshold).
ALIAS_DCHI2 = 25.0


def check_rivals(report: aliases.AliasReport, t: np.ndarray, y: np.ndarray, dy: np.ndarray,
                 best: refine.HarmonicFit, group: Any = None, group_err: Any = None) -> list[dict[str, Any]]:
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
        what = "an unrelated peak" if p.relation == "unrelated" else f"the {p.relation}"
        out.append({
            "period": rival.period, "grid_frequency": p.frequency, "relation": p.relation,
            "source": "rival periodogram peak (refined)", "delta_chi2": d, "settled": settled,
            "note": (f"{what} at P = {rival.period:.6g} d fits the light curve clearly worse (with "
                     f"{best.nterms} harmonics its chi2 is larger by {d:.0f}, where {ALIAS_DCHI2:g} would already "
                     f"decide): the adopted period is preferred" if settled else
                     f"{what} at P = {rival.period:.6g} d fits the light curve nearly as well (its chi2 is "
                     f"larger by only {d:.1f}, below the {ALIAS_DCHI2:g} that would decide): the choice between them "
                     f"is not secure; more nights spread in time would decide"),
        })
    return out


def cv_z(t: np.ndarray, y: np.ndarray, dy: np.ndarray, f_new: float, f_old: float, m: int = 5) -> float:
    """How much better (in standard errors) phase neighbours predict the points at f_new than at f_old."""
    w = 1.0 / dy**2
    tt = t - t.min()
    e_old = p_or_2p.loo_errors(tt, y, w, f_old, m)
    e_new = p_or_2p.loo_errors(tt, y, w, f_new, m)
    return float(p_or_2p.paired_z(w * (e_old**2 - e_new**2), f_new * tt, m))


def pdm_versus_periodogram(t: np.ndarray, y: np.ndarray, dy: np.ndarray, f_peak: float, f_pdm: float,
                           theta_pdm: float, baseline: float, z_crit: float, candidates: list[dict[str, Any]],
                           warnings: list[str]) -> float:
    """The candidate frequency: PDM's when phase neighbours predict the points clearly better there.

    Appends PDM's candidate (when it is not the periodogram's peak) to ``candidates`` and a
    warning when it is adopted (the rule: see the module docstring).
    """
    rel = aliases.relate(f_peak, f_pdm, baseline_d=baseline)
    if rel == "same peak":
        return f_peak
    z = cv_z(t, y, dy, f_pdm, f_peak)
    adopt = z > z_crit
    candidates.append({
        "period": 1.0 / f_pdm, "source": "PDM minimum (grid value)", "theta": theta_pdm,
        "relation_to_periodogram_peak": rel, "z": z,
        "note": (f"phase neighbours predict the points better at PDM's period (by {z:.1f} standard errors, more "
                 f"than the {z_crit:g} chance could give); this candidate was refined and adopted"
                 if adopt else f"rejected: the phased curve supports it no better than the periodogram peak (by "
                 f"{z:.1f} standard errors, where {z_crit:g} would be needed)"),
    })
    if not adopt:
        return f_peak
    warnings.append(
        f"PDM's period {1 / f_pdm:.6g} d ({rel} of the periodogram's {1 / f_peak:.6g} d) fits the phased "
        f"curve better (z = {z:.1f}) and is adopted; a sinusoid describes this light curve poorly"
    )
    return f_pdm


def rival_2p(choice: pdm.PeriodChoice, z_crit: float) -> dict[str, Any]:
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

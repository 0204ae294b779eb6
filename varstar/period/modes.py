"""The frequencies of a period analysis's final model, and the star's modes in words.

:func:`final_frequencies` lists the adopted model's frequencies (the main signal
first, then those prewhitening found, :mod:`.prewhiten`) as the entries of
:attr:`.result.PeriodResult.frequencies`; :func:`modes_note` says whether the star
is multi-periodic, names period ratios of known double-mode pulsators
(:data:`KNOWN_RATIOS`), and counts combinations and frequencies of nightly
systematics apart from the modes.
"""

from __future__ import annotations

from typing import Any

from varstar.results import json_float
from varstar.period import prewhiten, refine

__all__ = ["KNOWN_RATIOS", "final_frequencies", "frequency_entry", "modes_note"]


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


def modes_note(frequencies: list[dict[str, Any]]) -> tuple[bool, str]:
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


def frequency_entry(label: str, f: float, f_err: float, amp: float, amp_err: float, snr: float,
                    relation: str) -> dict[str, Any]:
    """One entry of the result's ``frequencies``: frequency, period, amplitude (errors), S/N, relation."""
    return {
        "label": label, "frequency": json_float(f), "frequency_err": json_float(f_err),
        "period": json_float(1.0 / f), "period_err": json_float(f_err / f**2),
        "amplitude": json_float(amp), "amplitude_err": json_float(amp_err), "snr": json_float(snr), "relation": relation,
    }


def final_frequencies(fit_ref: refine.HarmonicFit, pw: prewhiten.PrewhiteningResult, frequency: float,
                       frequency_err: float, single: bool) -> tuple[list[dict[str, Any]], bool, str]:
    """The frequencies of the final model, main first (its error the adopted one), and the modes.

    Takes the reference band's fit, the prewhitening, the adopted frequency and its
    error; returns the entries, whether the star is multi-periodic and the modes in
    words (:func:`modes_note`).  The main signal's S/N is the prewhitening's scaled
    to the final amplitude; with ``single`` the further frequencies are left out.
    """
    amp1 = fit_ref.amplitudes[0]
    amp1_err = fit_ref.amplitude_errs[0]
    first = pw.frequencies[0]
    snr1 = first.snr * (amp1 / first.amplitude if first.amplitude > 0 else 1.0)
    entries = [frequency_entry("f1", frequency, frequency_err, amp1, amp1_err, snr1, "")]
    if not single:
        entries += [frequency_entry(f.label, f.frequency, f.frequency_err, f.amplitude, f.amplitude_err, f.snr,
                                     f.relation) for f in pw.frequencies[1:]]
    multiperiodic, note = modes_note(entries)
    return entries, multiperiodic, note

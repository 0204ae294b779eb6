"""The result of one period analysis: :class:`PeriodResult`, and how probabilities are shown.

:func:`varstar.period.analysis.analyse` makes it; its :meth:`PeriodResult.to_dict`
is what ``varstar period --json`` prints and the archive stores, and its model
methods give the adopted light-curve model (:mod:`varstar.period.phased` puts it
on a phase grid).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from varstar.results import json_float

if TYPE_CHECKING:  # pragma: no cover
    from varstar.period.aliases import AliasPeak, AliasReport
    from varstar.period.pdm import PeriodChoice
    from varstar.period.prewhiten import PrewhiteningResult
    from varstar.period.refine import HarmonicFit

__all__ = ["PROBABILITY_FLOOR", "PeriodResult", "format_probability"]

#: Smallest probability reported as a number: below it the tail approximations and
#: double-precision rounding say nothing more, so "< 1e-16" is printed (and stored).
PROBABILITY_FLOOR = 1e-16


def format_probability(p: float | None) -> str:
    """A probability for people: ``"< 1e-16"`` below :data:`PROBABILITY_FLOOR`, never ``0``."""
    if p is None or not math.isfinite(p):
        return "n/a"
    if p < PROBABILITY_FLOOR:
        return f"< {PROBABILITY_FLOOR:.0e}"
    return f"{p:.2g}"


@dataclass(frozen=True, eq=False)
class PeriodResult:
    """The outcome of one period analysis: one adopted period, and what led to it.

    Attributes
    ----------
    period, period_err : float
        THE adopted period (days) and its 1-sigma error.  With several bands the
        per-band fitted frequencies are combined by inverse-variance weighting.
    frequency, frequency_err : float
        ``1/period`` (cycles/day) and its error.
    period_method : str
        How the adopted period was refined (harmonic fit or eclipse template) and
        how its error was made (``errors``).
    errors : str
        The error treatment in words (independent points, or nightly calibration
        errors as a shared covariance).
    amplitude, amplitude_err : float
        Peak-to-peak amplitude (mag) of the reference band's model of the main signal.
    epoch, epoch_err, epoch_kind : float, float, str
        BJD_TDB of maximum light (``epoch_kind="maximum"``) or minimum light
        (``"minimum"``) of the reference band's model, nearest the data's weighted
        mean time.
    frequencies : tuple of dict
        Every frequency in the final model, the main one first (``f1``): each with
        ``frequency``, ``frequency_err``, ``period``, ``period_err``, ``amplitude``
        (semi-amplitude of its first harmonic, mag), ``amplitude_err``, ``snr``
        and ``relation`` (a harmonic or combination of others, or "").
    multiperiodic : bool
        True when a further independent frequency is significant.
    modes_note : str
        In words: single period, or the modes with their period ratio.
    fap, fap_method : float, str
        False-alarm probability of the highest periodogram peak (at least
        :data:`PROBABILITY_FLOOR`) and how it was computed; ``fap_bootstrap`` is the
        bootstrap value when asked for (else NaN).
    fap_levels : dict
        Periodogram power needed for the probabilities in :data:`.analysis.FAP_LEVELS`.
    n_points, baseline_d : int, float
    bands : tuple of str
        Bands used; ``reference_band`` is the one whose fit gives amplitude and epoch.
    method, nterms, harmonics : str, int, int
        Periodogram used, its harmonics, and the harmonics of the final fit.
    grid : dict
        ``min_period``, ``max_period``, ``oversampling``, ``n_frequencies``, ``step``.
    aliases : AliasReport
        The periodogram's peaks at grid values; :meth:`to_dict` adds the refined
        period of each peak that was fitted.
    refined_peaks : dict
        Grid frequency of a fitted peak -> its refined frequency.
    pdm : dict
        The second method's best period on the grid, its theta, theta at the adopted
        period, and where it was evaluated.
    choice : PeriodChoice
        The P-or-2P verdict on the main signal (other frequencies removed).
    alias_check : tuple of dict
        For each rival peak that made the periodogram's choice insecure: the harmonic
        fit's chi-square excess there and whether that settles the choice.
    candidates : tuple of dict
        Every other period considered, labelled for what it is, with why it was
        not adopted.
    fits : dict of str to HarmonicFit
        Harmonic fit of the main signal per band (other frequencies removed).
    templates : dict of str to TemplateFit
        Eclipse-template fits per band (eclipsing binaries only).
    prewhitening : PrewhiteningResult or None
        The search for further frequencies on the reference band.
    warnings : tuple of str
    freq, power, theta : numpy.ndarray
        The grid, the periodogram and PDM's theta (NaN where not evaluated), for
        plots; not part of :meth:`to_dict`.
    """

    period: float
    period_err: float
    frequency: float
    frequency_err: float
    period_method: str
    errors: str
    amplitude: float
    amplitude_err: float
    epoch: float
    epoch_err: float
    epoch_kind: str
    frequencies: tuple[dict[str, Any], ...]
    multiperiodic: bool
    modes_note: str
    fap: float
    fap_method: str
    fap_bootstrap: float
    fap_levels: dict[float, float]
    n_points: int
    baseline_d: float
    bands: tuple[str, ...]
    reference_band: str
    method: str
    nterms: int
    harmonics: int
    grid: dict[str, Any]
    aliases: AliasReport
    refined_peaks: dict[float, float]
    pdm: dict[str, Any]
    choice: PeriodChoice
    candidates: tuple[dict[str, Any], ...]
    alias_check: tuple[dict[str, Any], ...]
    fits: dict[str, HarmonicFit]
    templates: dict[str, Any]
    prewhitening: PrewhiteningResult | None
    warnings: tuple[str, ...]
    freq: np.ndarray = field(repr=False)
    power: np.ndarray = field(repr=False)
    theta: np.ndarray = field(repr=False)
    others: dict[str, Any] = field(repr=False, default_factory=dict)

    def model(self, t: Any, band: str) -> np.ndarray:
        """The adopted model of ``band`` at times ``t``: the main signal (template for
        eclipsing binaries) plus any further frequencies."""
        main = self.templates[band] if band in self.templates else self.fits[band]
        extra = self.others.get(band)
        return main.model(t) + (0.0 if extra is None else extra(t))

    def main_model(self, t: Any, band: str) -> np.ndarray:
        """The main signal alone (for a phased curve with the other frequencies removed)."""
        main = self.templates[band] if band in self.templates else self.fits[band]
        return main.model(t)

    def other_signals(self, t: Any, band: str) -> np.ndarray:
        """The further frequencies' part of the model (zero for a single-period star)."""
        extra = self.others.get(band)
        return np.zeros(np.shape(t)) if extra is None else extra(t)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe plain dict: what ``varstar period --json`` prints and the archive stores."""
        def peak(p: AliasPeak) -> dict[str, Any]:
            refined = self.refined_peaks.get(p.frequency)
            return {
                "period": json_float(1.0 / refined if refined else p.period),
                "period_refined": refined is not None,
                "grid_period": json_float(p.period),
                "frequency": json_float(refined or p.frequency),
                "power": json_float(p.power),
                "power_ratio": json_float(p.power_ratio),
                "relation": p.relation,
            }

        return {
            "period": json_float(self.period),
            "period_err": json_float(self.period_err),
            "frequency": json_float(self.frequency),
            "frequency_err": json_float(self.frequency_err),
            "period_method": self.period_method,
            "errors": self.errors,
            "amplitude": json_float(self.amplitude),
            "amplitude_err": json_float(self.amplitude_err),
            "epoch": json_float(self.epoch),
            "epoch_err": json_float(self.epoch_err),
            "epoch_kind": self.epoch_kind,
            "time_system": "BJD_TDB",
            "frequencies": [dict(f) for f in self.frequencies],
            "multiperiodic": bool(self.multiperiodic),
            "modes_note": self.modes_note,
            "fap": json_float(max(self.fap, PROBABILITY_FLOOR)),
            "fap_text": format_probability(self.fap),
            "fap_method": self.fap_method,
            "fap_bootstrap": json_float(self.fap_bootstrap),
            "fap_levels": [{"fap": k, "power": json_float(v)} for k, v in sorted(self.fap_levels.items())],
            "n_points": int(self.n_points),
            "baseline_d": json_float(self.baseline_d),
            "baseline_days": json_float(self.baseline_d),  # the old name, kept for one release (README: Changes)
            "bands": list(self.bands),
            "reference_band": self.reference_band,
            "method": self.method,
            "nterms": int(self.nterms),
            "harmonics": int(self.harmonics),
            "grid": dict(self.grid),
            "aliases": [peak(p) for p in self.aliases.peaks],
            "alias_secure": bool(self.aliases.secure or (self.alias_check and all(c["settled"] for c in self.alias_check))),
            "alias_note": self.aliases.note,
            "alias_check": [dict(c) for c in self.alias_check],
            "pdm": dict(self.pdm),
            "period_choice": self.choice.to_dict(),
            "candidates": [dict(c) for c in self.candidates],
            "fits": {b: f.to_dict() for b, f in self.fits.items()},
            "templates": {b: f.to_dict() for b, f in self.templates.items()},
            "prewhitening": None if self.prewhitening is None else self.prewhitening.to_dict(),
            "warnings": list(self.warnings),
        }


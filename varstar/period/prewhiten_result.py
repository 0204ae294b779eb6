"""The result of prewhitening (:func:`varstar.period.prewhiten.prewhiten`).

:class:`FoundFrequency` is one frequency with its errors, S/N and relation to the
others; :class:`PrewhiteningResult` holds them all, the final simultaneous fit
(its model at any time) and why the search stopped.  Phases follow the cosine
convention of :mod:`varstar.period.refine`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np

from varstar.results import Result
from varstar.period.sinusoids import model_at

__all__ = ["FoundFrequency", "PrewhiteningResult"]


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
        return model_at(self.params, self.t_ref, len(self.frequencies), self.nterms, t)

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

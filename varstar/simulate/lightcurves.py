"""Light curves of the simulated stars: the pulsation template and the kinds of variability.

:func:`pulsation_template` is the normalised shape of a pulsating star (maximum
light exactly at phase 0); :class:`Pulsation`, :class:`Sinusoid` and
:class:`Trend` give a star's magnitude change in each band at given BJD_TDB.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["Pulsation", "Sinusoid", "Trend", "Variability", "pulsation_template"]


def pulsation_template(phase: np.ndarray, n_harmonics: int = 5) -> np.ndarray:
    """Normalised light-curve shape of a pulsating star, in magnitudes.

    A truncated Fourier sawtooth, -sum_k s_k sin(2 pi k phi) / k with Lanczos
    factors s_k = sinc(k / (K + 1)) to soften the ringing: a fast rise to maximum
    and a slow decline.  Normalised to zero mean over phase, peak-to-peak 1, and
    maximum light (minimum magnitude) exactly at phase 0.
    """
    shift, mean, p2p = _template_norm(n_harmonics)
    return (_raw_template(np.asarray(phase, dtype=float) + shift, n_harmonics) - mean) / p2p


def _raw_template(phase: np.ndarray, n_harmonics: int) -> np.ndarray:
    k = np.arange(1, n_harmonics + 1, dtype=float)
    s = np.sinc(k / (n_harmonics + 1)) / k
    ph = np.asarray(phase, dtype=float)
    return -(np.sin(2.0 * np.pi * ph[..., None] * k) * s).sum(axis=-1)


@functools.lru_cache(maxsize=16)
def _template_norm(n_harmonics: int) -> tuple[float, float, float]:
    """Phase of maximum light, phase-mean and peak-to-peak of the raw template."""
    from scipy.optimize import minimize_scalar

    grid = np.arange(8192) / 8192.0
    raw = _raw_template(grid, n_harmonics)
    i = int(np.argmin(raw))
    res = minimize_scalar(
        lambda p: float(_raw_template(np.array([p]), n_harmonics)[0]),
        bracket=(grid[i] - 1 / 8192, grid[i], grid[i] + 1 / 8192),
        tol=1e-12,
    )
    shift = float(res.x) % 1.0
    lo = float(res.fun)
    # Phase mean is exactly zero for a pure sine series.
    hi = float(np.max(_raw_template(np.arange(65536) / 65536.0, n_harmonics)))
    return shift, 0.0, hi - lo


@dataclass(frozen=True)
class Pulsation:
    """Periodic pulsation with an asymmetric (sawtooth-like) light curve.

    ``amplitude`` maps band -> peak-to-peak amplitude (mag).  The epoch is a time
    of maximum light in BJD_TDB.  The colour changes with phase because the
    amplitudes differ between bands.
    """

    period: float
    epoch: float
    amplitude: Mapping[str, float]
    n_harmonics: int = 5

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        """Magnitude change in ``band`` at ``bjd_tdb`` (the template times the band's amplitude)."""
        phase = (np.asarray(bjd_tdb, dtype=float) - self.epoch) / self.period
        return self.amplitude[band] * pulsation_template(phase % 1.0, self.n_harmonics)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe description (``kind`` and the parameters), as ``truth.json`` records it."""
        return {"kind": "pulsation", "period": self.period, "epoch": self.epoch,
                "amplitude_p2p": dict(self.amplitude), "n_harmonics": self.n_harmonics,
                "epoch_is": "maximum light"}


@dataclass(frozen=True)
class Sinusoid:
    """Small sinusoidal variation; ``amplitude`` maps band -> peak-to-peak (mag)."""

    period: float
    epoch: float
    amplitude: Mapping[str, float]

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        """Magnitude change in ``band`` at ``bjd_tdb``: half the peak-to-peak amplitude times a sine."""
        arg = 2.0 * np.pi * (np.asarray(bjd_tdb, dtype=float) - self.epoch) / self.period
        return 0.5 * self.amplitude[band] * np.sin(arg)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe description (``kind`` and the parameters), as ``truth.json`` records it."""
        return {"kind": "sinusoid", "period": self.period, "epoch": self.epoch,
                "amplitude_p2p": dict(self.amplitude), "epoch_is": "mean brightness, getting fainter"}


@dataclass(frozen=True)
class Trend:
    """Slow linear drift; ``rate`` maps band -> mag per day, zero at ``ref_bjd_tdb``."""

    rate: Mapping[str, float]
    ref_bjd_tdb: float

    def delta_mag(self, bjd_tdb: np.ndarray, band: str) -> np.ndarray:
        """Magnitude change in ``band`` at ``bjd_tdb``: the rate times the time since ``ref_bjd_tdb``."""
        return self.rate[band] * (np.asarray(bjd_tdb, dtype=float) - self.ref_bjd_tdb)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe description (``kind`` and the parameters), as ``truth.json`` records it."""
        return {"kind": "trend", "rate_mag_per_d": dict(self.rate), "ref_bjd_tdb": self.ref_bjd_tdb}


#: Any kind of variability a simulated star can have.
Variability = Pulsation | Sinusoid | Trend

"""The adopted model of a period analysis on a phase grid, and the light curve phased.

What a phased-light-curve figure or table needs from a
:class:`~varstar.period.result.PeriodResult`: one cycle of the main signal's
model per band (:func:`phased_model`), the points with the further frequencies
removed, their phases and their residuals from the whole model
(:func:`phased_data`).  Phase 0 is the result's epoch; phases are
``(t - epoch) / period`` modulo 1 (:func:`fold_phase`).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from varstar.period.result import PeriodResult

__all__ = ["fold_phase", "phased_data", "phased_model"]


def fold_phase(t: Any, period: float, epoch: float) -> np.ndarray:
    """Phase in [0, 1) of times ``t`` for a period (days) and an epoch (same time system as ``t``).

    ``(t - epoch) / period`` modulo 1; a value that rounds to exactly 1 (a time a
    hair before an epoch) is returned as 0.
    """
    phase = np.mod((np.asarray(t, dtype=float) - epoch) / period, 1.0)
    return np.where(phase < 1.0, phase, 0.0)


def phased_model(res: PeriodResult, n: int = 400) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per band, one cycle of the main signal's model on a phase grid (phase 0 at the result's epoch)."""
    phase = np.linspace(0.0, 1.0, n, endpoint=False)
    return {b: (phase, res.main_model(res.epoch + phase * res.period, b)) for b in res.fits}


def phased_data(res: PeriodResult, lc: pd.DataFrame) -> tuple[pd.DataFrame, np.ndarray]:
    """The light curve with the further frequencies removed (what folds at the adopted
    period), and the residuals of every point from the whole model.

    ``lc`` needs the columns ``bjd_tdb``, ``mag`` and ``band``.  The returned copy
    of it also has a ``phase`` column: :func:`fold_phase` of ``bjd_tdb`` at the
    result's period and epoch.  Points of a band the result has no model for keep
    their magnitudes and get a NaN residual.
    """
    main = lc.copy()
    resid = np.full(len(lc), np.nan)
    t, mag = lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy()
    for b in res.fits:
        m = (lc["band"] == b).to_numpy()
        main.loc[m, "mag"] = mag[m] - res.other_signals(t[m], b)
        resid[m] = mag[m] - res.model(t[m], b)
    main["phase"] = fold_phase(t, res.period, res.epoch)
    return main, resid

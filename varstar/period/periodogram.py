"""The periodogram of a period analysis and the significance of its highest peak.

Steps 1-3 of :func:`varstar.period.analysis.analyse`: the frequency grid from the
baseline (:mod:`.grid`); the generalised Lomb-Scargle periodogram (:mod:`.gls`),
or for several bands the multi-band periodogram with one shared frequency
(:mod:`.multiband`); a refusal when its highest point is an end of the grid (no
peak inside the range); and the false-alarm probability of the highest peak
(Baluev 2008, :mod:`.significance`), with a bootstrap on request (resampling
within each band when there are several).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from varstar.errors import InputError
from varstar.period import grid, gls, multiband, significance
from varstar.period.series import Series, span_words

__all__ = ["FAP_LEVELS", "Periodogram", "compute_periodogram", "multiband_bootstrap", "peak_significance",
           "refuse_edge_peak"]


#: False-alarm probabilities whose power levels are reported and drawn.
FAP_LEVELS = (0.1, 0.01, 0.001)


@dataclass(frozen=True)
class Periodogram:
    """Steps 1-2: the grid, the periodogram on it, its method in words and its highest point."""

    freq: np.ndarray
    power: np.ndarray
    method: str
    f_peak: float
    p_peak: float


def compute_periodogram(s: Series, min_period: float | None, max_period: float | None, oversampling: float,
                        nterms: int) -> Periodogram:
    """Steps 1-2: the frequency grid from the baseline and the (multi-band) periodogram on it.

    Takes the series and the grid settings; returns a :class:`Periodogram`.  Raises
    InputError when the highest point is an end of the grid (:func:`refuse_edge_peak`).
    """
    freq = grid.frequency_grid(s.t, min_period=min_period, max_period=max_period, oversampling=oversampling)
    if s.multi:
        power = multiband.multiband_power(s.t, s.y, s.dy, s.band, freq, nterms=nterms)
        method = (f"multi-band generalised Lomb-Scargle ({nterms} harmonic{'s' if nterms > 1 else ''}, "
                  f"bands {', '.join(s.bands)})")
    else:
        power = gls.gls_power(s.t, s.y, s.dy, freq, nterms=nterms)
        method = f"generalised Lomb-Scargle ({nterms} harmonic{'s' if nterms > 1 else ''})"
    i_best = int(np.nanargmax(power))
    f_peak, p_peak = float(freq[i_best]), float(power[i_best])
    refuse_edge_peak(i_best, freq, s.baseline, s.night)
    return Periodogram(freq, power, method, f_peak, p_peak)


def refuse_edge_peak(i_best: int, freq: np.ndarray, baseline: float, night: Any) -> None:
    """Refuse a periodogram whose highest point is an end of the grid (no peak inside the range)."""
    if i_best not in (0, freq.size - 1):
        return
    f_peak = float(freq[i_best])
    span = span_words(baseline, night)
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


def peak_significance(t: np.ndarray, y: np.ndarray, dy: np.ndarray, band: np.ndarray, freq: np.ndarray,
                      p_peak: float, nterms: int, multi: bool, bootstrap: int,
                      rng: Any) -> tuple[float, str, dict[float, float], float]:
    """Step 3: false-alarm probability of the highest peak, its method, the power levels of
    FAP_LEVELS and the bootstrap value (NaN without a bootstrap).

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
            fap_boot = multiband_bootstrap(t, y, dy, band, freq, nterms, int(bootstrap), gen, p_peak)
        else:
            fap_boot = float(significance.fap_bootstrap(t, y, dy, freq, nterms=nterms, n_bootstrap=int(bootstrap),
                                                        rng=gen, power=p_peak)[0])
    return fap, fap_method, fap_levels, fap_boot


def multiband_bootstrap(t: np.ndarray, y: np.ndarray, dy: np.ndarray, band: np.ndarray, freq: np.ndarray,
                        nterms: int, n_boot: int, rng: np.random.Generator, peak: float) -> float:
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

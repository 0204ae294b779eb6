"""When the simulated observer observes: dark windows, the interleaved exposure
schedule of each night, and every exposure's times, airmass and frame name.

The dark windows come from the cheap almanac (:mod:`.almanac`); the exposures'
BJD_TDB, airmass and altitude from :func:`varstar.timescale.exposure_times`,
rounded to the precision the files print, so that the truth files hold exactly
what the physics used.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..timescale import exposure_times, night_label
from ..almanac import approx_field_altitude, approx_sun_altitude, date_to_jd0
from .scenario import Scenario

__all__ = ["Exposures", "dark_windows", "night_schedule", "plan_exposures"]

_NIGHT_GRID_STEP_D = 1.0 / 1440.0  # one-minute grid for the dark-window search


def dark_windows(scenario: Scenario) -> list[tuple[float, float]]:
    """For each night, (first, last) JD UTC at which the Sun is below ``sun_limit_deg``
    and the field above ``altitude_limit_deg`` (longest such stretch, 1-minute grid).

    Uses the cheap almanac formulae (:func:`approx_sun_altitude`,
    :func:`approx_field_altitude`): accurate to well under a minute of time here.
    """
    out = []
    grid = np.arange(0, 18 * 60 + 1) * _NIGHT_GRID_STEP_D  # 15h to 09h local mean time
    for plan in scenario.nights:
        local_noon = date_to_jd0(plan.evening) + 0.5 - scenario.longitude_deg / 360.0
        jd = local_noon + 0.125 + grid
        sun = approx_sun_altitude(jd, scenario.latitude_deg, scenario.longitude_deg)
        alt = approx_field_altitude(jd, scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg, scenario.longitude_deg)
        ok = (sun < scenario.sun_limit_deg) & (alt > scenario.altitude_limit_deg)
        if not ok.any():
            raise InputError(
                f"scenario night {plan.evening}: the field is never above {scenario.altitude_limit_deg} deg while the Sun "
                f"is below {scenario.sun_limit_deg} deg; choose another date or field"
            )
        edges = np.diff(np.concatenate([[0], ok.astype(np.int8), [0]]))
        starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
        k = int(np.argmax(stops - starts))
        out.append((float(jd[starts[k]]), float(jd[stops[k] - 1])))
    return out


def night_schedule(scenario: Scenario, rng: np.random.Generator) -> list[dict[str, np.ndarray]]:
    """Interleaved exposures (bands in scenario order) for each night.

    Returns one dict per night: ``jd`` (mid-exposure JD UTC), ``band_idx``,
    ``exptime`` and ``session`` (start, stop JD of the observing session).  The
    overheads between exposures are drawn from ``rng``.
    """
    exptimes = np.array([b.exptime_s for b in scenario.bands])
    nb = len(exptimes)
    nights = []
    for i, (plan, (w0, w1)) in enumerate(zip(scenario.nights, dark_windows(scenario))):
        start = w0 + plan.start_delay_h / 24.0
        stop = w1 if plan.max_hours is None else min(w1, start + plan.max_hours / 24.0)
        if stop <= start:
            raise InputError(f"scenario night {plan.evening}: start_delay_h leaves no time to observe")
        n_max = int(math.ceil((stop - start) * 86400.0 / (exptimes.min() + scenario.overhead_s))) + nb
        band_idx = np.arange(n_max) % nb
        t_exp = exptimes[band_idx]
        step = t_exp + scenario.overhead_s + rng.uniform(0.0, scenario.overhead_jitter_s, n_max)
        t_start = start + np.concatenate([[0.0], np.cumsum(step[:-1])]) / 86400.0
        keep = t_start + t_exp / 86400.0 <= stop
        jd_mid = np.round(t_start[keep] + 0.5 * t_exp[keep] / 86400.0, 6)
        nights.append({"jd": jd_mid, "band_idx": band_idx[keep], "exptime": t_exp[keep], "session": (start, stop)})
    return nights


@dataclass(frozen=True)
class Exposures:
    """Every exposure of a simulated series, in time order (arrays of one entry per exposure).

    ``bjd`` and ``airmass`` are rounded as the files print them (6 and 4
    decimals); ``frames`` holds names ``YYYYMMDD-NNN``.  Per night:
    ``evenings``, ``first_jd`` (the first exposure's JD) and ``session_mid``
    (the middle of the observing session, JD).
    """

    night_idx: np.ndarray
    jd: np.ndarray
    band_idx: np.ndarray
    exptime: np.ndarray
    bjd: np.ndarray
    airmass: np.ndarray
    altitude: np.ndarray
    frames: np.ndarray
    evenings: tuple[str, ...]
    first_jd: np.ndarray
    session_mid: np.ndarray

    @property
    def n(self) -> int:
        """Number of exposures."""
        return int(self.jd.size)


def _night_times(scenario: Scenario, jd: np.ndarray, evening: str) -> tuple[np.ndarray, ...]:
    """BJD_TDB, airmass, altitude and frame names of one night's exposures at ``jd`` (JD UTC)."""
    et = exposure_times(jd, scenario.ra_deg, scenario.dec_deg, scenario.latitude_deg,
                        scenario.longitude_deg, scenario.elevation_m)
    labels = night_label(jd, scenario.longitude_deg)
    if not np.all(labels == evening):
        raise InputError(f"scenario night {evening}: exposures fall on night {labels[0]}; check the date")
    prefix = evening.replace("-", "") + "-"
    frames = np.char.add(prefix, np.char.zfill(np.arange(1, jd.size + 1).astype(str), 3)).astype(object)
    return np.round(et.bjd_tdb, 6), np.round(et.airmass, 4), et.altitude_deg, frames


def plan_exposures(scenario: Scenario, rng: np.random.Generator) -> Exposures:
    """All exposures of the scenario's nights (:func:`night_schedule` drawn from ``rng``) with their times.

    Raises :class:`InputError` when a night has no exposure or its exposures
    fall on another night than planned.
    """
    sched = night_schedule(scenario, rng)
    night_idx = np.concatenate([np.full(s["jd"].size, i) for i, s in enumerate(sched)])
    jd = np.concatenate([s["jd"] for s in sched])
    bjd = np.empty_like(jd)
    airmass = np.empty_like(jd)
    altitude = np.empty_like(jd)
    evenings = tuple(p.evening for p in scenario.nights)
    frames = np.empty(jd.size, dtype=object)
    for i in range(len(sched)):
        m = night_idx == i
        if not m.any():
            raise InputError(f"scenario night {evenings[i]}: no exposure fits in the observing window")
        bjd[m], airmass[m], altitude[m], frames[m] = _night_times(scenario, jd[m], evenings[i])
    return Exposures(
        night_idx=night_idx,
        jd=jd,
        band_idx=np.concatenate([s["band_idx"] for s in sched]),
        exptime=np.concatenate([s["exptime"] for s in sched]),
        bjd=bjd,
        airmass=airmass,
        altitude=altitude,
        frames=frames,
        evenings=evenings,
        first_jd=np.array([s["jd"][0] for s in sched]),
        session_mid=np.array([0.5 * (s["session"][0] + s["session"][1]) for s in sched]),
    )

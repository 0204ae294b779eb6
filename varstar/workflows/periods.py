"""Period analysis of an archive: read the light curve, call :func:`varstar.period.analyse`, record the result.

The result is recorded (with its inputs: star, bands, nights, grid, method,
software version, date) in the archive's period history, so the history can be
read back with :meth:`varstar.archive.ArchiveStore.periods`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import pandas as pd

from ..errors import InputError
from ..results import plain, utc_now

if TYPE_CHECKING:  # pragma: no cover
    from ..archive import ArchiveStore
    from ..period import PeriodResult


#: The light-curve columns the analyses read (fewer columns read faster on long archives).
ANALYSIS_COLUMNS = ("bjd_tdb", "mag", "mag_err", "cal_err", "band", "star", "night", "transformed")


@dataclass(frozen=True, eq=False)
class StoredPeriod:
    """A period analysis of an archive with what it was run on.

    ``result`` is the core's :class:`~varstar.period.PeriodResult`; ``record`` is
    the dict stored in the archive (the result's ``to_dict()`` plus the inputs).
    ``lightcurve`` holds the points analysed (for plots).
    """

    result: PeriodResult
    record: dict[str, Any]
    lightcurve: pd.DataFrame
    analysis: int | None

    def to_dict(self) -> dict[str, Any]:
        return dict(self.record, analysis=self.analysis)


def _epoch_kind(archive: ArchiveStore) -> str | None:
    eph = archive.target.extra.get("ephemeris")
    if isinstance(eph, dict) and eph.get("kind") in ("minimum", "maximum"):
        return str(eph["kind"])
    return None


def period_of_archive(
    archive: ArchiveStore,
    *,
    band: str = "all",
    star: str | None = None,
    include_flagged: bool = False,
    store: bool = True,
    seed: int | None = None,
    timeout_s: float = 30.0,
    **options: Any,
) -> StoredPeriod:
    """Run :func:`varstar.period.analyse` on an archive's light curve and record it.

    Parameters
    ----------
    archive
        An opened archive.
    band
        A band name, or ``"all"`` for every band together (multi-band periodogram).
    star
        Star id (default: the target).
    include_flagged
        Also use points of flagged exposures (not recommended).
    store
        Append the result to the archive's ``/periods`` table (default).  Nothing
        is written when the analysis fails.
    seed
        Seed of the bootstrap's random generator (``bootstrap=N`` in ``options``).
    options
        Passed to :func:`varstar.period.analyse` (``min_period``, ``max_period``,
        ``oversampling``, ``nterms``, ``harmonics``, ``bootstrap``,
        ``single``, ...).  Each night's calibration error (``cal_err``) is passed
        with the points, so period errors include the nights' offsets.
    """
    from .. import __version__
    from ..period import analyse

    lc = archive.lightcurve(None if band == "all" else band, star, include_flagged=include_flagged, columns=ANALYSIS_COLUMNS)
    if lc.empty:
        which = "any band" if band == "all" else f"band {band}"
        raise InputError(f"{archive.path}: no good points of {star or archive.target.target_star.id} in {which}; nothing to analyse")
    if options.get("bootstrap") and seed is None:
        seed = 0  # a fixed default keeps reruns identical (Determinism in ARCHITECTURE.md)
    if options.get("epoch_kind") is None:
        options["epoch_kind"] = _epoch_kind(archive)
    res = analyse(
        lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy(), lc["band"].to_numpy(),
        night=lc["night"].to_numpy(), cal_err=lc["cal_err"].to_numpy(), rng=seed, **options,
    )
    record = plain(res.to_dict())
    record.update(
        star=str(lc["star"].iloc[0]),
        nights=sorted(set(map(str, lc["night"]))),
        include_flagged=bool(include_flagged),
        standard_system=bool(lc["transformed"].any()),
        software=f"varstar {__version__}",
        computed_utc=utc_now(),
        seed=seed,
    )
    analysis = None
    if store:
        with archive.writing(timeout_s=timeout_s) as w:
            analysis = w.append_period(record, {
                "star": record["star"], "bands": ",".join(res.bands), "method": res.method, "nterms": res.nterms,
                "n_points": res.n_points, "nights": ",".join(record["nights"]), "baseline_days": res.baseline_d,
                "period": res.period, "period_err": res.period_err, "epoch": res.epoch, "epoch_err": res.epoch_err,
                "amplitude": res.amplitude, "fap": res.fap,
            })
    return StoredPeriod(res, record, lc, analysis)

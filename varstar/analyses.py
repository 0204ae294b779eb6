"""Analyses of a whole archive: the shell between the archive and :mod:`varstar.period`.

Reads the light curve, calls the pure core, and records the result (with its
inputs: star, bands, nights, grid, method, software version, date) in the
archive's ``/periods`` table so the period history can be read back.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from .errors import ArchiveError, InputError

if TYPE_CHECKING:  # pragma: no cover
    from .archive import Archive
    from .period import PeriodResult


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


def _epoch_kind(archive: Archive) -> str | None:
    eph = archive.target.extra.get("ephemeris")
    if isinstance(eph, dict) and eph.get("kind") in ("minimum", "maximum"):
        return str(eph["kind"])
    return None


def period_of_archive(
    archive: Archive,
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
        ``prewhitening``, ...).
    """
    from . import __version__
    from .archive import tables, transaction
    from .archive.store import utc_now
    from .export import plain, to_json
    from .period import analyse

    lc = archive.lightcurve(None if band == "all" else band, star, include_flagged=include_flagged)
    if lc.empty:
        which = "any band" if band == "all" else f"band {band}"
        raise InputError(f"{archive.path}: no good points of {star or archive.target.target_star.id} in {which}; nothing to analyse")
    if options.get("bootstrap") and seed is None:
        seed = 0  # a fixed default keeps reruns identical (Determinism in ARCHITECTURE.md)
    if options.get("epoch_kind") is None:
        options["epoch_kind"] = _epoch_kind(archive)
    res = analyse(
        lc["bjd_tdb"].to_numpy(), lc["mag"].to_numpy(), lc["mag_err"].to_numpy(), lc["band"].to_numpy(),
        rng=seed, **options,
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
        with transaction(archive.path, timeout_s=timeout_s) as f:
            analysis = tables.n_rows(f, "periods")
            tables.append(f, "periods", {
                "analysis": [analysis],
                "computed_utc": [record["computed_utc"]],
                "software": [record["software"]],
                "star": [record["star"]],
                "bands": [",".join(res.bands)],
                "method": [res.method],
                "nterms": [res.nterms],
                "n_points": [res.n_points],
                "nights": [",".join(record["nights"])],
                "baseline_days": [res.baseline_days],
                "period": [res.period],
                "period_err": [res.period_err],
                "epoch": [res.epoch],
                "epoch_err": [res.epoch_err],
                "amplitude": [res.amplitude],
                "fap": [res.fap],
                "result": [to_json(dict(record, analysis=analysis))],
            })
    return StoredPeriod(res, record, lc, analysis)


def period_history(archive: Archive) -> pd.DataFrame:
    """Every stored period analysis, oldest first (``result`` holds the whole JSON record)."""
    from .archive import tables

    with archive._open() as f:
        if "periods" not in f:
            raise ArchiveError(f"{archive.path}: this archive has no period table")
        return pd.DataFrame(tables.read(f, "periods"))


def phased_model(res: PeriodResult, n: int = 400) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Per band, one cycle of the fitted model on a phase grid (phase 0 at the result's epoch)."""
    phase = np.linspace(0.0, 1.0, n, endpoint=False)
    return {b: (phase, res.model(res.epoch + phase * res.period, b)) for b in res.fits}

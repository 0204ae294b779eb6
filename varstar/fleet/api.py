"""The fleet as an object: :func:`open_fleet` returns a :class:`Fleet` whose methods are the fleet operations."""

from __future__ import annotations

import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .folder import FleetSpec, load_fleet

if TYPE_CHECKING:  # pragma: no cover
    import dask.dataframe as dd
    import pandas as pd


@dataclass(frozen=True)
class Fleet(FleetSpec):
    """A fleet (its folder, targets, defaults) with the fleet operations as methods returning DataFrames."""

    def route(self, files: Sequence[str | Path]) -> pd.DataFrame:
        """Which archive each file belongs to: one row per file (``file``, ``status``: matched, unmatched or
        ambiguous, ``archive``, ``rule``: name or stars, ``why``); see :func:`varstar.fleet.route`."""
        from .routing import route_detail, routing_table

        return routing_table(*route_detail(self, files))

    def ingest(self, inbox: Sequence[str | Path], *, workers: int | None = None, scheduler: str | None = None,
               progress: Callable[[int, int, Any], None] | None = None) -> pd.DataFrame:
        """:func:`varstar.fleet.ingest_fleet` as a table, one row per target given files (failures are rows)."""
        from .runs import ingest_fleet

        return ingest_fleet(self, inbox, workers=workers, scheduler=scheduler, progress=progress).table()

    def update(self, *, period: bool = True, timings: bool = False, workers: int | None = None,
               scheduler: str | None = None, progress: Callable[[int, int, Any], None] | None = None) -> pd.DataFrame:
        """:func:`varstar.fleet.update_fleet` as a table, one row per archive."""
        from .runs import update_fleet

        return update_fleet(self, period=period, timings=timings, workers=workers, scheduler=scheduler,
                            progress=progress).table()

    def summary(self) -> pd.DataFrame:
        """:func:`varstar.fleet.fleet_summary`."""
        from .summary import fleet_summary

        return fleet_summary(self)

    def lightcurves(self, band: str | None = None, *, include_flagged: bool = False,
                    columns: Sequence[str] | None = None) -> dd.DataFrame:
        """Every target's light curve as one Dask DataFrame, one partition per archive, with a ``target`` column.

        Lazy: nothing is read until ``.compute()`` (on whatever Dask scheduler is in
        force).  ``band``, ``include_flagged`` and ``columns`` are those of
        :meth:`varstar.archive.ArchiveStore.lightcurve`; ``target`` comes first.
        The first archive is read once now, for the columns' types.
        """
        from .lightcurves import fleet_lightcurves

        return fleet_lightcurves(self, band=band, include_flagged=include_flagged, columns=columns)


def open_fleet(path: str | os.PathLike[str]) -> Fleet:
    """Open a fleet: its folder (or its ``fleet.toml``); see :func:`varstar.fleet.folder.load_fleet`.

    With a fleet file, its targets and defaults; without one, every ``*.h5`` in the
    folder, each named by its file stem.
    """
    spec = load_fleet(path)
    return Fleet(spec.path, spec.entries, spec.defaults, spec.fleet_file)

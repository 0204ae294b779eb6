"""Every target's light curve as one Dask DataFrame: one partition per archive, built lazily."""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

from .folder import FleetSpec
from .tasks import lightcurve_part

if TYPE_CHECKING:  # pragma: no cover
    import dask.dataframe as dd


def fleet_lightcurves(fleet: FleetSpec, *, band: str | None = None, include_flagged: bool = False,
                      columns: Sequence[str] | None = None) -> dd.DataFrame:
    """See :meth:`varstar.fleet.Fleet.lightcurves`.

    Built with :func:`dask.dataframe.from_map` over the archives; text columns stay
    Python objects (Dask's conversion to Arrow strings is turned off for this
    frame), so a partition's ``compute()`` is exactly the archive's
    :meth:`~varstar.archive.ArchiveStore.lightcurve` with ``target`` in front.
    """
    import dask
    import dask.dataframe as dd

    entries = list(fleet.entries)
    if not entries:
        from ..errors import InputError

        raise InputError(f"{fleet.path}: the fleet has no archive")
    cols = None if columns is None else list(columns)
    meta = lightcurve_part(str(entries[0].archive), entries[0].name, band, include_flagged, cols).iloc[:0]
    with dask.config.set({"dataframe.convert-string": False}):
        return dd.from_map(lightcurve_part, [str(e.archive) for e in entries], [e.name for e in entries],
                           band=band, include_flagged=include_flagged, fields=cols, meta=meta,
                           divisions=None, enforce_metadata=False)

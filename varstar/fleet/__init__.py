"""Many targets at once: a fleet of archives, one per target, processed in parallel on Dask.

A fleet is a folder of archives (the ``.h5`` files ``varstar init`` makes) with
an optional ``fleet.toml`` listing them and the defaults of its operations
(:mod:`varstar.fleet.folder`).  The operations:

- :func:`init_fleet` — one archive per target description, and the fleet file;
- :func:`route` — which archive each night file of an inbox belongs to
  (:mod:`varstar.fleet.routing` states the rule);
- :func:`ingest_fleet` — route, then ingest with one task per archive;
- :func:`update_fleet` — period analysis and/or timings of the archives that changed;
- :func:`fleet_summary` — one row per target, with what needs attention;
- :func:`open_fleet` — a :class:`Fleet` offering them as methods, and every
  light curve as one Dask DataFrame (:meth:`Fleet.lightcurves`).

The engine (:mod:`varstar.fleet.engine`) is a local Dask cluster of processes
started and stopped by each call, or a running cluster given by its address.
Names are imported lazily so that ``varstar --help`` stays quick.
"""

from __future__ import annotations

import importlib
from typing import Any

_API = {
    "Fleet": "varstar.fleet.api",
    "FleetEntry": "varstar.fleet.folder",
    "open_fleet": "varstar.fleet.api",
    "init_fleet": "varstar.fleet.folder",
    "route": "varstar.fleet.routing",
    "ingest_fleet": "varstar.fleet.runs",
    "update_fleet": "varstar.fleet.runs",
    "fleet_summary": "varstar.fleet.summary",
    "FleetError": "varstar.fleet.results",
    "FleetIngestResult": "varstar.fleet.results",
    "FleetUpdateResult": "varstar.fleet.results",
    "FleetInitResult": "varstar.fleet.results",
    "TargetOutcome": "varstar.fleet.results",
}

__all__ = sorted(_API)


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'varstar.fleet' has no attribute {name!r}")


def __dir__() -> list[str]:
    return __all__

"""FleetSpec operations that change archives: ingest the inbox, update the analyses; one task per archive.

A task per archive, never two on one archive, so no two writers ever meet on a
file; each task calls the one-archive workflow (:func:`varstar.workflows.night.ingest`,
:meth:`varstar.Archive.period`, :meth:`varstar.Archive.time_extrema`), which
changes its archive all or nothing under the archive's writer lock.  The engine
is :mod:`varstar.fleet.engine`.
"""

from __future__ import annotations

import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..results import utc_now
from .engine import SCHEDULER_ENV, Call, Progress, dask_client, run_calls
from .folder import FleetSpec, as_fleet
from .results import FleetIngestResult, FleetUpdateResult, TargetOutcome
from .routing import route


def write_failures(fleet: FleetSpec, outcomes: Sequence[TargetOutcome]) -> Path:
    """Keep the failures of this fleet ingest in the fleet folder (atomically; replaces the last one's)."""
    from ..export import write_atomic

    doc = {"written_utc": utc_now(), "fleet": str(fleet.path),
           "failures": [{"target": o.target, "archive": Path(o.archive).name, "error": o.error,
                         "error_kind": o.error_kind} for o in outcomes if o.failed]}
    return write_atomic(fleet.failures_file, (json.dumps(doc, ensure_ascii=False, indent=1) + "\n").encode("utf-8"))


def read_failures(fleet: FleetSpec) -> dict[str, dict[str, str]]:
    """The last fleet ingest's failures by archive file name ({} when none is kept or the file is unreadable)."""
    try:
        doc = json.loads(fleet.failures_file.read_text(encoding="utf-8"))
        return {str(f["archive"]): {"error": str(f.get("error", "")), "error_kind": str(f.get("error_kind", ""))}
                for f in doc.get("failures", [])}
    except (OSError, ValueError, TypeError, KeyError, AttributeError):
        return {}


def ingest_fleet(fleet: FleetSpec | str | os.PathLike[str], inbox_paths: Sequence[str | os.PathLike[str]], *,
                 workers: int | None = None, scheduler: str | None = None,
                 progress: Progress | None = None) -> FleetIngestResult:
    """Route the inbox's night files to their archives and ingest them, one parallel task per archive.

    Parameters
    ----------
    fleet
        A :class:`varstar.fleet.Fleet` or its folder.
    inbox_paths
        Night files (measurement tables, FITS frames) and folders of them; routed
        by :func:`varstar.fleet.route` (files matching no target, or two, are
        reported and not ingested).
    workers, scheduler
        The engine (:func:`varstar.fleet.engine.dask_client`).  ``scheduler``
        defaults to ``$DASK_SCHEDULER_ADDRESS``, else the fleet file's
        ``defaults.scheduler``; without any, a local engine of ``workers``
        processes (default: the fleet file's ``defaults.workers``, else one per core).
    progress
        Called as ``progress(done, total, outcome)`` as each task finishes.

    Returns
    -------
    FleetIngestResult
        Per target given files: nights added, files skipped as already stored, or
        the failure with its reason.  Rerunning is harmless: files already stored
        are skipped.  The failures are also kept in the fleet folder
        (``fleet-ingest-failures.json``, replaced by every fleet ingest) for
        :func:`varstar.fleet.fleet_summary`.
    """
    fl = as_fleet(fleet)
    if not inbox_paths:
        raise InputError("no inbox given: name the night files (or folders of them) to ingest")
    assignments, unmatched, ambiguous = route(fl, inbox_paths)
    calls = [Call(e.name, str(e.archive), _ingest_func(), (str(e.archive), [str(f) for f in assignments[e.archive]],
                                                         e.name, fl.defaults.wait_s), {})
             for e in fl.entries if e.archive in assignments]
    engine = "none (no file routed)"
    outcomes: list[TargetOutcome] = []
    if calls:
        files = [f for fs in assignments.values() for f in fs]
        with dask_client(n_tasks=len(calls), must_see=[fl.path, *files], workers=workers or fl.defaults.workers,
                         scheduler=_scheduler(scheduler, fl)) as (client, engine):
            outcomes = run_calls(client, calls, progress, label="ingest")
    kept = write_failures(fl, outcomes)
    return FleetIngestResult(str(fl.path), engine, tuple(outcomes), tuple(unmatched), tuple(ambiguous),
                             sum(o.failed for o in outcomes), str(kept))


def _scheduler(scheduler: str | None, fleet: FleetSpec) -> str | None:
    """The cluster to use: as given, else ``$DASK_SCHEDULER_ADDRESS``, else the fleet file's default (None: local)."""
    return scheduler or os.environ.get(SCHEDULER_ENV) or fleet.defaults.scheduler


def _ingest_func() -> Any:
    from .tasks import ingest_task

    return ingest_task


def update_fleet(fleet: FleetSpec | str | os.PathLike[str], *, period: bool = True, timings: bool = False,
                 workers: int | None = None, scheduler: str | None = None, progress: Progress | None = None,
                 period_options: Mapping[str, Any] | None = None) -> FleetUpdateResult:
    """Run the period analysis and/or the timings on every archive whose nights changed since, one task each.

    A target's period is analysed again when its latest stored analysis (of the
    target star) did not use exactly the nights stored now, or predates the
    latest night's ingest; its timings are looked for again when a night was
    ingested after the latest stored timing (an archive without an ephemeris
    skips them).  Each new result is stored in its archive's history.

    Parameters
    ----------
    period, timings
        Which analyses (at least one).
    period_options
        Options of :meth:`varstar.Archive.period` (default: the fleet file's
        ``[defaults.period]``, else the analysis' own defaults: every band together).
    workers, scheduler, progress
        As for :func:`ingest_fleet`.
    """
    from .tasks import update_task

    fl = as_fleet(fleet)
    if not (period or timings):
        raise InputError("nothing to update: ask for the period, the timings or both")
    options = dict(fl.defaults.period if period_options is None else period_options)
    calls = [Call(e.name, str(e.archive), update_task, (str(e.archive), e.name, period, timings, options,
                                                        fl.defaults.wait_s), {})
             for e in fl.entries]
    if not calls:
        return FleetUpdateResult(str(fl.path), "none (the fleet has no archive)")
    with dask_client(n_tasks=len(calls), must_see=[fl.path], workers=workers or fl.defaults.workers,
                     scheduler=_scheduler(scheduler, fl)) as (client, engine):
        outcomes = run_calls(client, calls, progress, label="update")
    return FleetUpdateResult(str(fl.path), engine, tuple(outcomes), sum(o.failed for o in outcomes))

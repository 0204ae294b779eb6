"""What a fleet task does on a worker: one archive, through the archive's public API.

Each function here runs in a worker process (module-level functions, so that
Dask can send them by reference), takes plain paths and returns a plain dict
(the fields of :class:`varstar.fleet.results.TargetOutcome`).  An expected
failure (:class:`varstar.errors.VarstarError`) is returned as data, so one bad
target never stops the others; anything else is a bug and travels back as the
task's exception.  Every change goes through the archive's own writer lock and
journal (one writer per archive; a killed task leaves the state before or after).
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence
from typing import Any

from ..errors import InputError, VarstarError


def missing_paths(paths: Sequence[str]) -> list[str]:
    """The paths this process cannot see (run on every worker before any task)."""
    return [p for p in paths if not os.path.exists(p)]


def _failed(base: dict[str, Any], exc: VarstarError) -> dict[str, Any]:
    return {**base, "status": "failed", "error": str(exc), "error_kind": type(exc).__name__}


def ingest_task(archive: str, files: Sequence[str], name: str, wait_s: float = 30.0) -> dict[str, Any]:
    """Ingest ``files`` into one archive (:func:`varstar.workflows.night.ingest`: all or nothing, under its lock)."""
    from ..threads import limit_blas_threads
    from ..workflows.night import ingest

    base: dict[str, Any] = {"target": name, "archive": archive, "files": tuple(files)}
    try:
        with limit_blas_threads():
            res = ingest(archive, list(files), timeout_s=wait_s)
    except VarstarError as exc:
        return _failed(base, exc)
    added = tuple(str(r["night"]) for r in res.nights)
    return {**base, "status": "done" if added else "unchanged", "nights_added": added,
            "skipped": tuple({"file": s["file"], "why": s["why"]} for s in res.skipped)}


def period_needed(periods: Any, star: str, nights: Any) -> str:
    """Why the target's period should be analysed again ("" when its latest analysis is up to date).

    Up to date: the latest stored analysis of the target star used exactly the
    nights stored now, and was computed no earlier than the latest night's ingest.
    """
    mine = periods[periods["star"] == star] if len(periods) else periods
    if not len(mine):
        return "no period analysis yet"
    last = mine.iloc[-1]
    used = {n for n in str(last["nights"]).split(",") if n}
    now = {str(n) for n in nights["night"]}
    if used != now:
        return f"{len(now - used)} night(s) added or replaced since analysis {int(last['analysis'])}"
    if str(nights["ingested_utc"].max()) > str(last["computed_utc"]):
        return f"a night was ingested again after analysis {int(last['analysis'])}"
    return ""


def timings_needed(timings: Any, nights: Any) -> str:
    """Why the timings should be looked for again ("" when none was ingested since the latest timing)."""
    if not len(timings):
        return "no timing stored yet"
    if str(nights["ingested_utc"].max()) > str(timings["computed_utc"].max()):
        return "nights ingested since the latest timing"
    return ""


def update_task(archive: str, name: str, period: bool = True, timings: bool = False,
                period_options: Mapping[str, Any] | None = None, wait_s: float = 30.0) -> dict[str, Any]:
    """Run the analyses of one archive that its new nights call for (see :func:`period_needed`, :func:`timings_needed`).

    The period analysis is :meth:`varstar.Archive.period` (stored in the period
    history); the timings :meth:`varstar.Archive.time_extrema` (new timings
    stored).  An archive without an ephemeris skips the timings; "no extremum can
    be timed" is a note, not a failure.
    """
    from ..threads import limit_blas_threads
    from ..workflows.archive import open_archive
    from ..workflows.extrema import active_ephemeris

    base: dict[str, Any] = {"target": name, "archive": archive}
    notes: list[str] = []
    out: dict[str, Any] = {}
    try:
        arch = open_archive(archive)
        nights = arch.nights()
        if nights.empty:
            return {**base, "status": "skipped", "note": "no nights yet"}
        with limit_blas_threads(preload=("scipy.linalg",)):
            if period:
                star = arch.target.target_star.id
                why = period_needed(arch.periods(), star, nights)
                if why:
                    sp = arch.period(timeout_s=wait_s, **dict(period_options or {}))
                    r = sp.result
                    out["period"] = {"period": float(r.period), "period_err": float(r.period_err),
                                     "analysis": sp.analysis, "why": why}
                else:
                    notes.append("period up to date")
            if timings:
                if active_ephemeris(arch)[1] is None:
                    notes.append("no ephemeris: timings skipped")
                else:
                    why = timings_needed(arch.timings(), nights)
                    if not why:
                        notes.append("timings up to date")
                    else:
                        try:
                            tr = arch.time_extrema(timeout_s=wait_s)
                            out["n_new_timings"] = int(tr.n_new)
                        except InputError as exc:  # nothing timeable yet: not a failure of the fleet
                            notes.append(f"no timing: {exc}")
    except VarstarError as exc:
        return _failed({**base, **out, "note": "; ".join(notes)}, exc)
    changed = "period" in out or out.get("n_new_timings", 0) > 0
    return {**base, **out, "status": "done" if changed else "unchanged", "note": "; ".join(notes)}


def lightcurve_part(archive: str, name: str, band: str | None, include_flagged: bool,
                    fields: Sequence[str] | None) -> Any:
    """One archive's light curve with a leading ``target`` column: one partition of the fleet's light curves."""
    from ..workflows.archive import open_archive

    cols = None if fields is None else list(fields)
    read = cols if cols is None or band is None or "band" in cols else [*cols, "band"]
    # every band is read and then filtered, so that an archive without that band gives an empty partition
    lc = open_archive(archive).lightcurve(None, include_flagged=include_flagged, columns=read)
    if band is not None:
        lc = lc[lc["band"] == band].reset_index(drop=True)
        if cols is not None and "band" not in cols:
            lc = lc.drop(columns="band")
    lc.insert(0, "target", name)
    return lc

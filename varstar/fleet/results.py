"""The results of fleet operations: one outcome per target, gathered in one result per call.

Each is a frozen dataclass with ``to_dict()`` (:class:`varstar.results.Result`),
so ``--json`` prints what the object holds, and ``table()`` gives the per-target
rows as a pandas DataFrame for :class:`varstar.fleet.Fleet`'s methods.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

from ..errors import ReductionError
from ..results import Result

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd


class FleetError(ReductionError):
    """Some targets of a fleet operation failed (or some files were not routed); the others were done.

    Exit code 4 (as :class:`varstar.errors.ReductionError`, the nearest kind: work
    was tried and could not be completed for some targets).  ``result`` holds the
    operation's JSON-ready result dict, whose fields ``varstar ... --json`` prints
    beside ``error`` and ``exit_code``.
    """

    def __init__(self, message: str, result: dict[str, Any]) -> None:
        super().__init__(message)
        self.result = result


@dataclass(frozen=True)
class TargetOutcome(Result):
    """What one task did for one archive.

    ``status`` is ``"done"`` (changed), ``"unchanged"`` (nothing new: every file
    already stored, or no analysis needed), ``"skipped"`` (nothing asked of it
    applies, with ``note``) or ``"failed"`` (``error`` says why; ``error_kind`` is
    the error's class, e.g. ``InputError``, ``ArchiveError``, ``KilledWorker``).
    """

    target: str
    archive: str
    status: str
    files: tuple[str, ...] = ()
    nights_added: tuple[str, ...] = ()
    skipped: tuple[dict[str, str], ...] = ()
    period: dict[str, Any] | None = None
    n_new_timings: int = 0
    note: str = ""
    error: str = ""
    error_kind: str = ""

    @property
    def failed(self) -> bool:
        return self.status == "failed"


def _table(outcomes: tuple[TargetOutcome, ...]) -> pd.DataFrame:
    import pandas as pd

    cols = ["target", "archive", "status", "files", "nights_added", "skipped", "period", "n_new_timings", "note",
            "error", "error_kind"]
    rows = []
    for o in outcomes:
        d = o.to_dict()
        d["files"] = len(o.files)
        d["nights_added"] = ",".join(o.nights_added)
        d["skipped"] = len(o.skipped)
        d["period"] = (o.period or {}).get("period", float("nan"))
        rows.append(d)
    return pd.DataFrame(rows, columns=cols)


@dataclass(frozen=True)
class FleetIngestResult(Result):
    """What :func:`varstar.fleet.ingest_fleet` did: one outcome per target given files, the files not routed."""

    fleet: str
    engine: str
    targets: tuple[TargetOutcome, ...] = ()
    unmatched: tuple[dict[str, str], ...] = ()
    ambiguous: tuple[dict[str, Any], ...] = ()
    n_failed: int = 0
    failures_file: str = ""

    def table(self) -> pd.DataFrame:
        """One row per target given files (``files``, ``skipped``: counts; ``nights_added``: labels joined by commas)."""
        return _table(self.targets)


@dataclass(frozen=True)
class FleetUpdateResult(Result):
    """What :func:`varstar.fleet.update_fleet` did: one outcome per archive of the fleet."""

    fleet: str
    engine: str
    targets: tuple[TargetOutcome, ...] = ()
    n_failed: int = 0

    def table(self) -> pd.DataFrame:
        """One row per archive (``period``: the new period in days, NaN when none was run)."""
        return _table(self.targets)


@dataclass(frozen=True)
class FleetInitResult(Result):
    """What :func:`varstar.fleet.init_fleet` created: the fleet file and one archive per target."""

    fleet: str
    fleet_file: str
    created: tuple[dict[str, str], ...] = field(default_factory=tuple)

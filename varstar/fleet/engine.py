"""The engine of fleet operations: tasks on Dask (Rocklin 2015), one task per archive.

By default each call starts a :class:`distributed.LocalCluster` of worker
processes on this machine (one per core, or ``workers``; never more than there
are tasks; one thread each) and shuts it down at the end.  A scheduler address
(``scheduler="tcp://host:8786"``, or the environment variable
``DASK_SCHEDULER_ADDRESS``) connects to a running cluster instead; its workers
must see the fleet folder and the inbox under the same paths (a shared file
system), which is checked on every worker before any task is sent.

The local engine lets a task fail at the first death of its worker (Dask's
``distributed.scheduler.allowed-failures`` = 0): the task is reported as failed
and its archive is in the state before or after the change (the archive's
journal); running the command again completes it.  A cluster keeps its own
setting (by default Dask tries such a task on other workers a few times).

Dask and distributed are imported inside the functions, so that ``varstar
--help`` stays quick.
"""

from __future__ import annotations

import contextlib
import logging
import os
import uuid
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ..errors import InputError
from .results import TargetOutcome

#: Environment variable naming a running Dask scheduler (Dask's own name for it).
SCHEDULER_ENV = "DASK_SCHEDULER_ADDRESS"
#: How long to wait for a cluster's scheduler to answer (our choice).
CONNECT_TIMEOUT_S = 10.0

Progress = Callable[[int, int, TargetOutcome], None]


@dataclass(frozen=True)
class Call:
    """One task: the function (in :mod:`varstar.fleet.tasks`), its arguments, and whom it is for."""

    target: str
    archive: str
    func: Callable[..., dict[str, Any]]
    args: tuple[Any, ...]
    kwargs: dict[str, Any]


def scheduler_address(scheduler: str | None) -> str | None:
    """The cluster to use: ``scheduler`` when given, else ``$DASK_SCHEDULER_ADDRESS``, else None (local engine)."""
    address = scheduler or os.environ.get(SCHEDULER_ENV) or None
    return address.strip() if address and address.strip() else None


@contextlib.contextmanager
def dask_client(*, n_tasks: int, must_see: Sequence[Path], workers: int | None = None,
                scheduler: str | None = None) -> Iterator[tuple[Any, str]]:
    """A Dask client and a description of the engine, for the duration of the block.

    Parameters
    ----------
    n_tasks
        How many tasks will be sent (the local engine starts no more workers).
    must_see
        Paths every worker must see (the fleet folder, the inbox files).
    workers
        Worker processes of the local engine (default: one per core).
    scheduler
        Address of a running scheduler (default: ``$DASK_SCHEDULER_ADDRESS``, else the local engine).
    """
    import dask
    from distributed import Client

    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise InputError(f"workers must be a whole number of at least 1, got {workers!r}")
    address = scheduler_address(scheduler)
    if address:
        try:
            client = Client(address, timeout=CONNECT_TIMEOUT_S, set_as_default=False)
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"cannot reach the Dask scheduler at {address} ({exc}); start it, or leave out "
                             f"--scheduler (and {SCHEDULER_ENV}) to use this machine") from None
        try:
            n = _check_workers(client, must_see, address)
            yield client, f"Dask cluster at {address} ({n} worker{'s' if n != 1 else ''})"
        finally:
            client.close()
        return
    from distributed import LocalCluster

    n = max(1, min(workers or os.cpu_count() or 1, max(n_tasks, 1)))
    # allowed-failures 0: a killed worker fails its task (reported, rerun by the user), never a silent retry;
    # no statistical profiler on the workers: it samples every task's stack every 10 ms, which on a 2-core
    # machine running coarse CPU-bound tasks costs a few per cent of the wall time (measured with
    # benchmarks/bench_fleet.py) and shows nothing a fleet needs
    with dask.config.set({"distributed.scheduler.allowed-failures": 0, "distributed.worker.profile.enabled": False}):
        cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=":0",
                               silence_logs=logging.CRITICAL)
        try:
            client = Client(cluster, set_as_default=False)
            try:
                _check_workers(client, must_see, "this machine")
                yield client, f"local engine ({n} worker process{'es' if n != 1 else ''})"
            finally:
                client.close()
        finally:
            cluster.close()


def missing_on_workers(client: Any, paths: Sequence[str]) -> dict[str, list[str]]:
    """Per worker (by address), the ``paths`` it cannot see (run on every worker)."""
    from .tasks import missing_paths

    return client.run(missing_paths, list(paths))


def _check_workers(client: Any, must_see: Sequence[Path], where: str) -> int:
    """Refuse when there is no worker or a worker cannot see a path; the number of workers."""
    paths = sorted({str(Path(p).resolve()) for p in must_see})
    seen = missing_on_workers(client, paths)
    if not seen:
        raise InputError(f"the Dask scheduler at {where} has no workers; start some, then run the command again")
    blind = {w: m for w, m in seen.items() if m}
    if blind:
        worker, missing = sorted(blind.items())[0]
        raise InputError(
            f"{len(blind)} of {len(seen)} Dask workers cannot see the fleet's files (e.g. worker {worker}: "
            f"{', '.join(missing[:3])}{', ...' if len(missing) > 3 else ''}); the workers must reach the fleet "
            f"folder and the inbox under the same paths, through a shared file system; nothing was done")
    return len(seen)


def _task_failure(call: Call, exc: BaseException) -> TargetOutcome:
    """A task that did not return: its worker died, or a bug; said for a person."""
    kind = type(exc).__name__
    if kind == "KilledWorker":
        why = ("the worker process running this task died (killed, or out of memory); the archive is in its state "
               "before or after the change (its journal completes a committed change when it is next opened); "
               "run the command again to complete it")
    elif kind in ("CancelledError", "FutureCancelledError"):
        why = "the task was cancelled (the cluster lost it, or the run was interrupted); run the command again"
    else:
        why = f"internal error ({kind}: {exc}); please report it"
    return TargetOutcome(target=call.target, archive=call.archive, status="failed", error=why, error_kind=kind)


def run_calls(client: Any, calls: Sequence[Call], progress: Progress | None = None, *, label: str = "task"
              ) -> list[TargetOutcome]:
    """Submit one task per call and gather the outcomes as the tasks finish (in the order of ``calls``).

    ``progress(done, total, outcome)`` is called as each task finishes
    (:func:`distributed.as_completed`).  Interrupting cancels what is left.
    """
    from distributed import as_completed

    token = uuid.uuid4().hex[:8]
    futures = {}
    for i, call in enumerate(calls):
        fut = client.submit(call.func, *call.args, key=f"varstar-{label}-{token}-{i}", pure=False, **call.kwargs)
        futures[fut] = i
    outcomes: list[TargetOutcome | None] = [None] * len(calls)
    done = 0
    try:
        for fut in as_completed(list(futures), loop=client.loop):
            i = futures[fut]
            try:
                outcome = TargetOutcome(**fut.result())
            except Exception as exc:  # the task raised (a bug) or its worker died
                outcome = _task_failure(calls[i], exc)
            outcomes[i] = outcome
            done += 1
            if progress is not None:
                progress(done, len(calls), outcome)
    finally:
        pending = [f for f in futures if not f.done()]
        if pending:
            client.cancel(pending)
    return [o for o in outcomes if o is not None]

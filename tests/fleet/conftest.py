"""Fixtures of the fleet tests: a real Dask cluster, and no cluster named by the environment."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def cluster():
    """A real local Dask cluster of 2 worker processes; a task fails at its worker's first death."""
    import dask
    from distributed import Client, LocalCluster

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}):
        lc = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0")
        client = Client(lc, set_as_default=False)
        try:
            yield lc.scheduler_address, client
        finally:
            client.close()
            lc.close()


@pytest.fixture(autouse=True)
def _no_cluster_from_the_environment(monkeypatch):
    monkeypatch.delenv("DASK_SCHEDULER_ADDRESS", raising=False)

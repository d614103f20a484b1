"""Fixtures shared by the trainer tests."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def cluster():
    """A LocalCluster of 2 single-threaded worker processes and its client, started once for the
    cluster tests of train and select (slow)."""
    distributed = pytest.importorskip("distributed")
    import dask

    # one retry only, so that a killed-worker test ends after two deaths, not four
    with dask.config.set({"distributed.scheduler.allowed-failures": 1}):
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=None,
                                      processes=True) as local:
            with distributed.Client(local) as client:
                yield client

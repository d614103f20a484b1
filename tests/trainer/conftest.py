"""Fixtures shared by the trainer tests."""

from __future__ import annotations

from contextlib import contextmanager

import pytest


@pytest.fixture(scope="session")
def cluster(tmp_path_factory):
    """A LocalCluster of 2 single-threaded worker processes and its client, started once for the
    cluster tests of train and select (slow)."""
    distributed = pytest.importorskip("distributed")
    import dask

    # one retry only, so that a killed-worker test ends after two deaths, not four
    scratch = str(tmp_path_factory.mktemp("dask"))  # not Dask's dask-scratch-space in $TMPDIR
    with dask.config.set({"distributed.scheduler.allowed-failures": 1,
                          "temporary-directory": scratch}):
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, dashboard_address=None,
                                      processes=True, local_directory=scratch) as local:
            with distributed.Client(local) as client:
                yield client


@pytest.fixture
def synchronous(request, monkeypatch):
    """``--cluster`` runs on Dask's synchronous scheduler in this process (no workers: fast), the
    file cut into partitions of the test module's ``PARTITION_BYTES``."""
    dask = pytest.importorskip("dask")
    from nodecast.trainer import distributed, frames

    @contextmanager
    def connect(address):
        with dask.config.set(scheduler="sync"):
            yield None

    monkeypatch.setattr(distributed, "connect", connect)
    monkeypatch.setattr(frames, "BLOCK_BYTES", request.module.PARTITION_BYTES)

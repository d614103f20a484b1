"""Training on a Dask cluster: the passes of a streamed fit run on partitions, merged on the client.

Domain and targets by reductions (min, max, counts), anchors by global row index, each partition's
k nearest candidates of every anchor merged into the global k, each partition's R factor of its
design block combined by a tree of small Householder QRs (TSQR), held-out rows by a hash of the
global row index (:mod:`nodecast.trainer.row_hash`). The hidden layer is the single-process layer bit
for bit; the output layer differs only by the rounding of a different order of QR steps.

A worker that dies makes the run fail with one line (Dask retries a task on another worker first,
``distributed.scheduler.allowed-failures`` times); nothing is written then.
"""

from __future__ import annotations

import logging
import tempfile
from contextlib import contextmanager

import numpy as np

from nodecast.compiler.errors import NodecastError, one_line
from nodecast.trainer import partition_passes as passes
from nodecast.trainer import ridge_choice, solvers
from nodecast.trainer.metrics import MetricSums
from nodecast.trainer.streamed_fit import StreamedFit


class ClusterRows:
    """Row partitions of a table on a cluster: Dask delayed objects, each (X, Y or labels)."""

    def __init__(self, parts, lengths=None, progress=None) -> None:
        self.parts, self.lengths, self.progress = list(parts), lengths, progress

    def compute(self, tasks, what: str | None = None):
        """Results of ``tasks`` in order; with ``what`` (one task per partition), the pass's
        progress is reported where there is a reader and a distributed client."""
        import dask

        client = self._client() if what and self.lengths is not None else None
        if client is None:
            return dask.compute(*tasks)
        from dask.distributed import as_completed

        futures = client.compute(list(tasks))
        index = {future.key: i for i, future in enumerate(futures)}
        self.progress.start(what, sum(self.lengths))
        for future in as_completed(futures):
            self.progress.advance(self.lengths[index[future.key]])
        return client.gather(futures)

    def reduce(self, tasks, combine, what: str):
        """``combine`` folded over the results of ``tasks`` (one per partition) by a binary tree
        whose nodes run on the workers: one result."""
        from dask import delayed

        client = self._client() if self.lengths is not None else None
        if client is None:
            level = list(tasks)
            while len(level) > 1:
                pairs = [delayed(combine)(a, b) for a, b in zip(level[::2], level[1::2], strict=False)]
                level = pairs + ([level[-1]] if len(level) % 2 else [])
            return self.compute(level)[0]
        from dask.distributed import as_completed

        level = client.compute(list(tasks))
        index = {future.key: i for i, future in enumerate(level)}
        self.progress.start(what, sum(self.lengths))
        for future in as_completed(level):
            self.progress.advance(self.lengths[index[future.key]])
        while len(level) > 1:
            pairs = [client.submit(combine, a, b) for a, b in zip(level[::2], level[1::2], strict=False)]
            level = pairs + ([level[-1]] if len(level) % 2 else [])
        return level[0].result()

    def _client(self):
        if self.progress is None or self.progress.report is None:
            return None
        try:
            from dask.distributed import get_client

            return get_client()
        except (ImportError, ValueError):
            return None

    def counts(self) -> list[int]:
        if self.lengths is None:
            from dask import delayed

            self.lengths = list(self.compute([delayed(passes.count)(p) for p in self.parts]))
        return self.lengths

    def starts(self, lengths=None) -> list[int]:
        lengths = self.counts() if lengths is None else lengths
        return [int(v) for v in np.concatenate([[0], np.cumsum(lengths)[:-1]])]


def fit_on_cluster(fit: StreamedFit, rows: ClusterRows, which: str, kept_counts, fraction, seed):
    """The passes of ``fit`` over the rows ``which`` of the partitions; returns the estimator."""
    from dask import delayed

    global_starts = rows.starts()
    counts = rows.counts() if which == "all" else kept_counts
    starts = rows.starts(counts)
    select = [(which, g, fraction, seed) for g in global_starts]
    shared = delayed(fit, pure=True)  # one copy per worker, not one per task
    parts = rows.compute([delayed(passes.anchors)(p, s, shared, w)
                          for p, s, w in zip(rows.parts, starts, select, strict=True)], "anchors")
    _merge_anchor_passes(fit, parts)
    if fit.finish_anchors():
        shared = delayed(fit, pure=True)
        found = rows.compute([delayed(passes.neighbours)(p, s, shared, w)
                              for p, s, w in zip(rows.parts, starts, select, strict=True)],
                             "neighbours")
        for nearest in found:
            fit.nearest.merge(nearest)
    shared = delayed(fit, pure=True)

    def factor_pass(layer):
        shared_layer = delayed(layer, pure=True)
        tasks = [delayed(passes.factor)(p, shared, shared_layer, w)
                 for p, w in zip(rows.parts, select, strict=True)]
        rest, design, targets, ranges = rows.reduce(tasks, passes.combine, "factor")
        if rest is None:
            raise ValueError("no rows to fit")
        if fit.checked is None:
            return rest, ranges, None
        check = ridge_choice.HeldOut(rest, design, targets)
        with solvers.single_blas_thread():
            return solvers.accumulate_designs([(design, targets)], start=rest), ranges, check

    fit.fit_output(factor_pass)
    return fit.estimator


def _merge_anchor_passes(fit: StreamedFit, parts) -> None:
    """Take the partitions' pass-1 results (in row order) into ``fit``."""
    for part in parts:
        fit.outside += part.outside
        fit.check_count += part.check_count
        fit.strided_x += part.strided_x
        if fit.plan is not None:
            np.minimum(fit.u_low, part.u_low, out=fit.u_low)
            np.maximum(fit.u_high, part.u_high, out=fit.u_high)
            here = ~np.isnan(part.anchor_rows[:, 0])
            fit.anchor_rows[here] = part.anchor_rows[here]
            fit.strided_u += part.strided_u
            fit.strided_t += part.strided_t


def figures_on_cluster(model, task: str, rows: ClusterRows, which: str, fraction, seed) -> dict:
    from dask import delayed

    select = [(which, g, fraction, seed) for g in rows.starts()]
    sums, shared = MetricSums(task), delayed(model, pure=True)
    for part in rows.compute([delayed(passes.figures)(p, shared, task, w)
                              for p, w in zip(rows.parts, select, strict=True)], "figures"):
        sums.merge(part)
    return sums.result()


@contextmanager
def connect(address: str):
    """A Dask client for ``--cluster``: a scheduler address, or local[:N] (N workers, default 2)."""
    try:
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise NodecastError("--cluster needs dask[distributed] (pip install 'dask[distributed]')") from None
    if address == "local" or address.startswith("local:"):
        text = address.partition(":")[2] or "2"
        if not text.isdigit() or int(text) < 1:
            raise NodecastError(f"--cluster local:N takes a positive number of workers, got {address!r}")
        import dask

        # Dask's scratch folder goes with the run (its default, dask-scratch-space, stays behind)
        with tempfile.TemporaryDirectory(prefix="nodecast-dask-") as scratch, \
                dask.config.set({"temporary-directory": scratch}):
            with LocalCluster(n_workers=int(text), threads_per_worker=1, dashboard_address=None,
                              silence_logs=logging.CRITICAL,  # stderr: our one line
                              local_directory=scratch) as cluster:
                with Client(cluster) as client:
                    yield client
        return
    try:
        client = Client(address, timeout="10s")
    except (OSError, ValueError, TimeoutError) as exc:
        raise NodecastError(f"cannot reach the Dask scheduler at {address!r}: {exc}") from None
    with client:
        yield client


@contextmanager
def worker_failures():
    """Turn a lost worker or a failed task into one line."""
    try:
        yield
    except NodecastError:
        raise
    except Exception as exc:
        name = type(exc).__name__
        if name == "KilledWorker":
            raise NodecastError("a Dask worker died while running a training task (after the "
                                "scheduler's retries); no bundle was written") from None
        if name in ("CommClosedError", "FutureCancelledError", "CancelledError"):
            raise NodecastError(f"lost the Dask cluster during training ({name}); no bundle was "
                                "written") from None
        if isinstance(exc, OSError):  # a worker's reader: a damaged or vanished file
            raise NodecastError(f"a Dask worker could not read the data ({one_line(exc)}); no "
                                "bundle was written") from None
        raise


@contextmanager
def reader_errors(path):
    """A cell the workers' reader refused (pandas raises ValueError or TypeError): one line naming
    the file; nodecast's own errors (a constant target, a bad --domain) pass as they are."""
    try:
        yield
    except NodecastError:
        raise
    except (ValueError, TypeError) as exc:
        text = str(exc).rpartition("Original Message:")[2]
        raise NodecastError(f"{path}: {' '.join(text.split())} (read on the cluster)") from None

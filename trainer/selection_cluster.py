"""``nodecast select --cluster``: the passes of the streamed search
(:mod:`nodecast.trainer.selection_passes`) run on the partitions of a Dask cluster and merged on the
client, then the final fit by the cluster ``train`` (:mod:`nodecast.trainer.cluster_training`).

Per pass: the fold statistics by min, max and sums; anchors by index within each fold's training
rows (each partition's offset in them from the fold statistics); each partition's k nearest
candidates merged into the global k; each unit's factor of its partition rows combined by a tree of
small QRs (TSQR); each unit's validation sums over a partition's rows, added in partition order.
The folds are a hash of each row's input values, so a row's fold does not depend on its partition.
The hidden layers are the single-process layers bit for bit; output weights and scores differ
by rounding only.
"""

from __future__ import annotations

import numpy as np

from nodecast.trainer import partition_passes as passes
from nodecast.trainer.cluster_training import ClusterTraining
from nodecast.trainer.distributed import _merge_anchor_passes
from nodecast.trainer.fold_stats import FoldStats
from nodecast.trainer.folds import check_fold_sizes, check_folds, row_folds
from nodecast.trainer.selection_passes import SearchState

_ALL_ROWS = ("all", 0, 0.0, 0)  # partition_passes' row choice: the piece as given


def fold_stats_part(part, folds: int, seed: int, n_targets: int | None) -> FoldStats:
    X, Y = part
    stats = FoldStats(folds, X.shape[1], n_targets)
    stats.update(X, Y, row_folds(X, folds, seed))
    return stats


def anchors_part(part, state: SearchState, firsts, folds: int, seed: int) -> dict:
    """Per fold, the partition's share of the anchor pass (a StreamedFit copy)."""
    X, Y = part
    ids = row_folds(X, folds, seed)
    return {f: passes.anchors((X[ids != f], Y[ids != f]), int(firsts[f]), fit, _ALL_ROWS)
            for f, fit in state.fits.items()}


def neighbours_part(part, state: SearchState, firsts, folds: int, seed: int) -> dict:
    """Per fold, the partition's nearest-row candidates of every anchor (a NearestRows)."""
    X, Y = part
    ids = row_folds(X, folds, seed)
    return {f: passes.neighbours((X[ids != f], Y[ids != f]), int(firsts[f]), fit, _ALL_ROWS)
            for f, fit in state.fits.items() if fit.nearest is not None}


def factor_part(part, state: SearchState, folds: int, seed: int) -> list:
    """Per unit, the factor of its fold's training rows in the partition (None: no such rows)."""
    X, Y = part
    ids = row_folds(X, folds, seed)
    units = state.new_folds(len(ids) - np.bincount(ids, minlength=folds))
    state.push_factor(units, X, Y, ids)
    return [units[unit].factor for unit in state.units]


def merge_factors(left: list, right: list) -> list:
    """A node of the TSQR tree, for every unit (``left``'s rows first)."""
    return [passes.combine_factors(a, b) for a, b in zip(left, right, strict=True)]


def scores_part(part, state: SearchState, folds: int, seed: int) -> list:
    """Per unit, its validation sums over its fold's rows in the partition."""
    X, Y = part
    ids = row_folds(X, folds, seed)
    sums = state.new_sums(np.bincount(ids, minlength=folds))
    state.push_scores(sums, X, Y, ids)
    for each in sums.values():
        each.feed = each.make = each.shared = None  # ship the sums, not the buffers
    return [sums[unit] for unit in state.units]


class ClusterSelection(ClusterTraining):
    """The search's passes over cluster partitions (the checks of ``train`` first)."""

    def __init__(self, header, rows, job, folds: int) -> None:
        super().__init__(header, rows, job)
        self.folds, self.seed = folds, job.seed

    def tasks(self, function, *args):
        from dask import delayed

        return [delayed(function)(part, *args) for part in self.rows.parts]

    def search(self, layers, nodes, ridges, activation: str, scoring: str) -> SearchState:
        from dask import delayed

        from nodecast.trainer.selection_run import declared_box

        self._count()
        check_folds(self.folds, self.n_rows)
        parts = self.rows.compute(self.tasks(fold_stats_part, self.folds, self.seed,
                                             None if self.classify else len(self.job.targets)),
                                  "folds")
        stats = FoldStats(self.folds, len(self.features),
                          None if self.classify else len(self.job.targets))
        for part in parts:
            stats.merge(part)
        check_fold_sizes(stats.counts, self.n_rows)
        trained = [int(p.counts.sum()) - p.counts for p in parts]
        firsts = np.cumsum([np.zeros(self.folds, dtype=np.int64)] + trained[:-1], axis=0)
        classes = sorted(self.all.labels) if self.classify else None
        state = SearchState(layers, nodes, ridges, self.seed, activation, stats,
                            declared_box(self.job, self.features), classes, scoring)
        if state.fits:
            self._neighbourhoods(state, firsts)
        state.make_layers()
        shared = delayed(state, pure=True)
        factors = self.rows.reduce([delayed(factor_part)(p, shared, self.folds, self.seed)
                                    for p in self.rows.parts], merge_factors, "factor")
        state.solve(dict(zip(state.units, factors, strict=True)))
        shared = delayed(state, pure=True)
        total, *rest = self.rows.compute(self.tasks(scores_part, shared, self.folds, self.seed),
                                         "scores")
        for part in rest:
            for into, other in zip(total, part, strict=True):
                into.merge(other)
        state.sums = dict(zip(state.units, total, strict=True))
        return state

    def _neighbourhoods(self, state: SearchState, firsts) -> None:
        """The anchor and neighbour passes of the folds' data-driven fits."""
        from dask import delayed

        shared = delayed(state, pure=True)
        shares = self.rows.compute([delayed(anchors_part)(p, shared, f, self.folds, self.seed)
                                    for p, f in zip(self.rows.parts, firsts, strict=True)],
                                   "anchors")
        for fold, fit in state.fits.items():
            _merge_anchor_passes(fit, [share[fold] for share in shares])
        if not state.finish_anchors():
            return
        shared = delayed(state, pure=True)
        found = self.rows.compute([delayed(neighbours_part)(p, shared, f, self.folds, self.seed)
                                   for p, f in zip(self.rows.parts, firsts, strict=True)],
                                  "neighbours")
        for fold, fit in state.fits.items():
            for part in found:
                if fold in part:
                    fit.nearest.merge(part[fold])


def select_on_cluster(data, job, grid, settings, address: str, scoring=None, allowed_nodes=None,
                      progress=None):
    """``nodecast select --cluster``: (result, bundle) of the search and the final fit on Dask."""
    from nodecast.trainer import distributed, frames

    with distributed.connect(address), distributed.worker_failures(), distributed.reader_errors(data):
        header, rows = frames.file_partitions(data, job)
        rows.progress = progress
        return _select(header, rows, job, grid, settings, scoring, allowed_nodes)


def _select(header, rows, job, grid, settings, scoring, allowed_nodes):
    from nodecast.trainer import selection_stream as stream
    from nodecast.trainer.selection import box_probes, tabulate_units
    from nodecast.trainer.selection_run import finish_search, within_budget

    run = ClusterSelection(header, rows, job, settings.folds)

    def train(final):
        return ClusterTraining(header, rows, final).run()

    if job.task == "classification":
        from nodecast.trainer.class_selection import class_bundle

        layers, axes = stream.class_layers(grid)
        state = run.search(layers, grid.nodes, grid.ridges, settings.activation, scoring)
        result = stream.class_result(state, grid, axes, settings.folds, scoring)
        return result, class_bundle(result, train, job, settings.activation, run.n_rows)
    state = run.search(grid.layers, grid.nodes, grid.ridges, settings.activation, "rmse")
    probes = box_probes(run.low, run.high) if settings.tolerance is not None else None
    units = stream.regression_units(state, grid, settings, probes)
    points, diagnostics = tabulate_units(grid, units, run.all.y_low, run.all.y_high,
                                         settings.tolerance)
    return finish_search(within_budget(points, allowed_nodes), diagnostics, grid, settings, job,
                         train, run.n_rows)

"""``nodecast select`` on a table read chunk by chunk (:mod:`nodecast.trainer.sources`): the same
checks, grid points, choice and bundle as the search on the table in memory, byte for byte, in
memory that does not grow with the number of rows.

Passes over the source: the first measures everything ``train`` measures plus each fold's rows,
input ranges and target ranges (:class:`~nodecast.trainer.fold_stats.FoldStats`); then, shared by
all units (:mod:`nodecast.trainer.selection_passes`), anchors and neighbours (data-driven layers
only), one factor pass and one scoring pass; then the final fit by the streamed ``train``
(:mod:`nodecast.trainer.streaming`), which reads the source again.
"""

from __future__ import annotations

import itertools

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.trainer.cv_units import UnitSettings, unit_scores
from nodecast.trainer.fold_stats import FoldStats
from nodecast.trainer.folds import check_fold_sizes, check_folds, row_folds
from nodecast.trainer.method_grid import LayerSpec
from nodecast.trainer.selection_passes import SearchState, training_firsts
from nodecast.trainer.streaming import StreamedTraining, train_streaming


class StreamedSelection(StreamedTraining):
    """The passes of one search over a :class:`~nodecast.trainer.sources.TableSource`."""

    def __init__(self, source, job, folds: int, progress=None) -> None:
        super().__init__(source, job, progress)
        self.folds = folds
        self.fold_stats = FoldStats(folds, len(self.features),
                                    None if self.classify else len(job.targets))

    def count_chunk(self, X, Y) -> None:
        self.fold_stats.update(X, Y, row_folds(X, self.folds, self.job.seed))

    def pieces(self, what: str):
        """(X, Y or labels, folds of the rows, firsts) of every chunk (see SearchState)."""
        before = np.zeros(self.folds, dtype=np.int64)
        for _, X, Y in self.chunks(what):
            ids = row_folds(X, self.folds, self.job.seed)
            yield X, Y, ids, before
            before = training_firsts(ids, self.folds, before)

    def search(self, layers, nodes, ridges, activation: str, scoring: str) -> SearchState:
        """Every unit's validation sums (``state.sums``) after the passes."""
        from nodecast.trainer.selection_run import declared_box

        self._count()
        check_folds(self.folds, self.n_rows)
        check_fold_sizes(self.fold_stats.counts, self.n_rows)
        classes = sorted(self.all.labels) if self.classify else None
        state = SearchState(layers, nodes, ridges, self.job.seed, activation, self.fold_stats,
                            declared_box(self.job, self.features), classes, scoring)
        if state.fits:
            for piece in self.pieces("anchors"):
                state.take_anchors(*piece)
            if state.finish_anchors():
                for piece in self.pieces("neighbours"):
                    state.take_neighbours(*piece)
        state.make_layers()
        folds = state.new_folds(self.n_rows - state.counts)
        for X, Y, ids, _ in self.pieces("factor"):
            state.push_factor(folds, X, Y, ids)
        state.solve({unit: fold.factor for unit, fold in folds.items()})
        state.sums = state.new_sums(state.counts)
        for X, Y, ids, _ in self.pieces("scores"):
            state.push_scores(state.sums, X, Y, ids)
        return state


def regression_units(state: SearchState, grid, settings, probes) -> dict:
    """LayerSpec -> list over folds of UnitScores, as the in-memory search tabulates them."""
    budget = settings.precision if settings.tolerance is not None else None
    units: dict = {}
    for f, layer in state.units:
        unit = (f, layer)
        config = UnitSettings(layer, grid.nodes, grid.ridges, settings.seed, settings.activation,
                              budget)
        units.setdefault(layer, []).append(unit_scores(
            state.sums[unit], state.unit_layers[unit], state.solutions[unit], state.fold_norm(f),
            config, probes))
    return units


def class_layers(grid) -> tuple[list, list]:
    """(LayerSpecs, keys (k, s, fold) of the in-memory classifier search) of a classifier grid."""
    from nodecast.trainer.class_selection import _layer_axes

    neighbors, slope_scales = _layer_axes(grid)
    return [LayerSpec("data-driven", (("n_neighbors", k), ("slope_scale", s)))
            for k, s in itertools.product(neighbors, slope_scales)], (neighbors, slope_scales)


def class_result(state: SearchState, grid, axes, folds: int, scoring: str):
    """The ClassSelection (without model) of the units' sums."""
    from nodecast.trainer.class_selection import ClassPoint, ClassSelection, _class_grid, _tabulate

    table = _class_grid(grid.nodes, *axes, grid.ridges)
    keys = list(itertools.product(*axes, range(folds)))
    values = [state.sums[(f, layer)].values() for layer in state.layers for f in range(folds)]
    points = _tabulate(table, keys, values, scoring)
    return ClassSelection(points, min(points, key=ClassPoint.rank_key), scoring, folds)


def select_streaming(source, job, grid, settings, allowed_nodes=None, progress=None):
    """``nodecast select`` (regression) over a chunked source; returns (SelectionResult, Bundle)."""
    from nodecast.trainer.selection import box_probes, tabulate_units
    from nodecast.trainer.selection_run import finish_search, within_budget

    run = StreamedSelection(source, job, settings.folds, progress)
    state = _guarded(run.search, grid.layers, grid.nodes, grid.ridges, settings.activation, "rmse")
    probes = box_probes(run.low, run.high) if settings.tolerance is not None else None
    points, diagnostics = tabulate_units(grid, regression_units(state, grid, settings, probes),
                                         run.all.y_low, run.all.y_high, settings.tolerance)
    return finish_search(within_budget(points, allowed_nodes), diagnostics, grid, settings, job,
                         lambda final: train_streaming(source, final, progress), run.n_rows)


def select_classes_streaming(source, job, grid, folds, activation, scoring, progress=None):
    """``nodecast select --task classification`` over a chunked source; (ClassSelection, Bundle)."""
    from nodecast.trainer.class_selection import class_bundle

    run = StreamedSelection(source, job, folds, progress)
    layers, axes = class_layers(grid)
    state = _guarded(run.search, layers, grid.nodes, grid.ridges, activation, scoring)
    result = class_result(state, grid, axes, folds, scoring)
    return result, class_bundle(result, lambda final: train_streaming(source, final, progress),
                                job, activation, run.n_rows)


def _guarded(search, *args):
    try:
        return search(*args)
    except ValueError as exc:
        if isinstance(exc, NodecastError):
            raise
        raise NodecastError(f"cannot run the search: {' '.join(str(exc).split())}") from None

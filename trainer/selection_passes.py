"""The state of a model selection whose rows arrive in pieces (chunks of a file, or cluster
partitions), between its passes; every unit (fold, hidden layer) of the search is served by the
same passes:

1. anchors (data-driven layers): per fold one :class:`~nodecast.trainer.streamed_fit.StreamedFit`
   of max(M) nodes over the fold's training rows, anchors drawn by index within those rows;
2. neighbours: one pass for the largest k of the grid, every k taking its first k;
3. factor: every unit folds its fold's training rows (:class:`~nodecast.trainer.unit_blocks.UnitFold`);
4. scores: every unit sums its errors on its fold's validation rows for every (ridge, M)
   (:class:`~nodecast.trainer.unit_blocks.ValidationSums`).

A piece is (X, Y or labels, ids, firsts): ``ids`` the rows' folds
(:func:`nodecast.trainer.folds.row_folds`), ``firsts[f]`` the index of the piece's first
training row of fold f among all of fold f's training rows. The layers are those the in-memory
search draws on the same rows (the streamed fits draw the in-memory layers bit for bit).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.trainer.generators.data_driven import default_neighbors
from nodecast.trainer.solvers import single_blas_thread
from nodecast.trainer.streamed_fit import StreamedFit
from nodecast.trainer.unit_blocks import DesignBuffer, UnitFold, ValidationSums, solutions_of


class SearchState:
    """layers : the grid's LayerSpecs; stats : the first pass's FoldStats; declared : (low, high)
    of shape (n,) each, NaN where not declared; classes : all labels (classification) or None."""

    def __init__(self, layers, nodes, ridges, seed: int, activation: str, stats, declared,
                 classes=None, scoring: str = "rmse") -> None:
        self.layers, self.nodes, self.ridges = tuple(layers), tuple(nodes), tuple(ridges)
        self.scoring, self.kernel = scoring, get_activation(activation)
        self.counts = stats.counts
        self.n_rows = int(stats.counts.sum())
        self.units = [(f, layer) for layer in self.layers for f in range(stats.folds)]
        self.fits, self.free = {}, {}
        for f in range(stats.folds):
            box, targets = stats.training_box(f, *declared), stats.target_range(f)
            for layer in self.layers:
                if layer.method == "data-driven" and f in self.fits:
                    continue
                fit = _fold_fit(layer, max(self.nodes), seed, activation, classes, len(box[0]))
                fit.start(self.n_rows - int(stats.counts[f]), *targets, classes, box=box)
                if layer.method == "data-driven":
                    self.fits[f] = fit
                else:
                    self.free[(f, layer)] = fit
        self.norms = {}  # per fold, a fit whose normalisation (the fold's box and scalings) it is
        for (f, _), fit in self.free.items():
            self.norms.setdefault(f, fit)
        self.norms.update(self.fits)
        self.unit_layers = self.solutions = self.sums = None  # after the passes that make them

    def pieces_of(self, X, Y, ids, rows: str = "train"):
        """(fold, normalised inputs, targets) of each fold's ``rows`` ("train" or "valid") in a
        piece; targets normalised for training, in target units or class codes for validation."""
        for f, norm in self.norms.items():
            keep = ids != f if rows == "train" else ids == f
            if not keep.any():
                continue
            if rows == "train":
                yield f, norm.inputs(X[keep]), norm.targets(Y[keep])
            elif self.scoring == "rmse":
                yield f, norm.inputs(X[keep]), Y[keep]
            else:
                yield f, norm.inputs(X[keep]), np.searchsorted(norm.estimator.classes_, Y[keep])

    # passes 1 and 2 -----------------------------------------------------------------------------
    def take_anchors(self, X, Y, ids, firsts) -> None:
        for f, fit in self.fits.items():
            keep = ids != f
            fit.take_anchor_chunk(int(firsts[f]), X[keep], Y[keep])

    def finish_anchors(self) -> bool:
        """True where a neighbour pass is needed (for any fold)."""
        ks = [layer.kwargs.get("n_neighbors") for layer in self.layers
              if layer.method == "data-driven"]
        with single_blas_thread():  # as the in-memory units: the same bits on any machine
            needed = [fit.finish_anchors(lambda q, fit=fit: [min(k or default_neighbors(q),
                                                                 fit.n_rows) for k in ks])
                      for fit in self.fits.values()]
        return any(needed)

    def take_neighbours(self, X, Y, ids, firsts) -> None:
        for f, fit in self.fits.items():
            if fit.nearest is not None:
                keep = ids != f
                fit.take_neighbour_chunk(int(firsts[f]), X[keep], Y[keep])

    def make_layers(self) -> None:
        """Each unit's hidden layer (no pass: from the anchors' neighbourhoods)."""
        self.unit_layers = {}
        with single_blas_thread():
            self._draw_layers()
        self.fits = {f: _without_neighbours(fit) for f, fit in self.fits.items()}
        self.norms = {f: _without_neighbours(fit) for f, fit in self.norms.items()}

    def _draw_layers(self) -> None:
        for f, layer in self.units:
            if layer.method == "data-driven":
                kwargs = layer.kwargs
                self.unit_layers[(f, layer)] = self.fits[f].layer_for(
                    kwargs.get("n_neighbors"), float(kwargs.get("slope_scale", 1.0)))
            else:
                self.unit_layers[(f, layer)] = self.free[(f, layer)].layer

    # passes 3 and 4 -----------------------------------------------------------------------------
    def new_folds(self, train_counts) -> dict:
        """A UnitFold per unit for ``train_counts[f]`` training rows of fold f."""
        shared = DesignBuffer()
        return {unit: UnitFold(self.unit_layers[unit], self.kernel, int(train_counts[unit[0]]),
                               shared) for unit in self.units}

    def push_factor(self, folds: dict, X, Y, ids) -> None:
        for f, U, T in self.pieces_of(X, Y, ids, "train"):
            for layer in self.layers:
                folds[(f, layer)].push(U, T)

    def solve(self, factors: dict) -> None:
        """Every unit's output weights for every (ridge, M) from its factor."""
        self.solutions = {unit: solutions_of(factors[unit], self.ridges, self.nodes)
                          for unit in self.units}

    def new_sums(self, valid_counts) -> dict:
        shared = DesignBuffer()
        sums = {}
        for unit in self.units:
            norm = self.norms[unit[0]].estimator
            target = (norm.output_offset_, norm.output_scale_) if self.scoring == "rmse" else None
            sums[unit] = ValidationSums(self.unit_layers[unit], self.kernel, self.solutions[unit],
                                        self.nodes, int(valid_counts[unit[0]]), self.scoring,
                                        target, shared)
        return sums

    def push_scores(self, sums: dict, X, Y, ids) -> None:
        for f, U, target in self.pieces_of(X, Y, ids, "valid"):
            for layer in self.layers:
                sums[(f, layer)].push(U, target)

    def fold_norm(self, f: int) -> SimpleNamespace:
        """Fold f's box and scalings, as :func:`nodecast.trainer.cv_units.fold_network` reads them."""
        est = self.norms[f].estimator
        return SimpleNamespace(input_offset=est.input_offset_, input_scale=est.input_scale_,
                               output_offset=est.output_offset_, output_scale=est.output_scale_,
                               low=est.domain_low_, high=est.domain_high_)


def training_firsts(ids: np.ndarray, folds: int, before) -> np.ndarray:
    """``before`` advanced by a piece: each fold's training rows in it (all rows not of the fold)."""
    return before + (len(ids) - np.bincount(ids, minlength=folds))


def _fold_fit(layer, n_nodes: int, seed: int, activation: str, classes, n_features: int):
    from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor

    settings = {k: v for k, v in layer.kwargs.items() if k not in ("n_neighbors", "slope_scale")}
    estimator = (RandomNodeClassifier if classes is not None else RandomNodeRegressor)(
        n_nodes=n_nodes, method=layer.method, n_neighbors=None, slope_scale=1.0, ridge=0.0,
        activation=activation, random_state=seed, check_fraction=0.0, **settings)
    return StreamedFit(estimator, "classification" if classes is not None else "regression",
                       n_features)


def _without_neighbours(fit: StreamedFit) -> StreamedFit:
    """The fit without what only the layer needed (so that what the later passes ship is small)."""
    import copy

    fit = copy.copy(fit)
    fit.nearest = fit.anchor_rows = fit.strided_x = fit.strided_u = fit.strided_t = None
    return fit

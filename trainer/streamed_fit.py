"""One model fitted from rows that arrive in chunks: the passes of an estimator's fit, each taking
the rows chunk by chunk in global row order, holding O(M (n + k) + block) numbers, never O(N).

The passes, after the caller has counted the rows and measured the targets (:meth:`start`):

1. anchors: normalise each chunk, keep the input ranges, the rows outside the box and the rows of
   the anchors (drawn by global row index, :mod:`nodecast.trainer.anchors`);
2. neighbours (data-driven only): each chunk's nearest rows of every anchor, merged
   (:mod:`nodecast.trainer.neighbours`); then the hidden layer;
3. factor: the rows regrouped into the very row blocks of an in-memory fit
   (:func:`nodecast.trainer.hidden.block_bounds`), hidden designs, the solver's factor; then the
   ridge and the output layer by the estimator's own code.

Every step is the arithmetic of :meth:`RandomNodeRegressor.fit` on the same rows in the same blocks,
so the model is the in-memory model bit for bit whatever the chunk size.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Iterable, Iterator

import numpy as np
from sklearn.utils import check_random_state

from nodecast.compiler.activations import get_activation
from nodecast.trainer import solvers
from nodecast.trainer.estimators import _normaliser
from nodecast.trainer.generators import GENERATORS
from nodecast.trainer.generators.data_driven import default_neighbors, layer_from_neighbourhoods, plan_nodes
from nodecast.trainer.hidden import PreactivationRange, block_bounds, design_blocks
from nodecast.trainer.neighbours import NearestRows

DATA_FREE_METHODS = ("interval", "domain-anchored")  # generators that read no rows, only n


def reblock(pieces: Iterable[tuple], bounds) -> Iterator[tuple]:
    """Regroup consecutive row pieces (tuples of arrays with equal row counts) into the row blocks
    ``bounds`` ((start, stop) pairs covering 0 .. N in order)."""
    pending, held = [], 0
    pieces = iter(pieces)
    for start, stop in bounds:
        while held < stop - start:
            piece = next(pieces)
            pending.append(piece)
            held += len(piece[0])
        joined = tuple(np.concatenate(parts) if len(pending) > 1 else parts[0]
                       for parts in zip(*pending, strict=True))
        size = stop - start
        yield tuple(part[:size] for part in joined)
        rest = tuple(part[size:] for part in joined)
        pending, held = ([rest], len(rest[0])) if len(rest[0]) else ([], 0)


class StreamedFit:
    """The state of one estimator's fit between passes (see the module's docstring)."""

    def __init__(self, estimator, task: str, n_features: int) -> None:
        self.estimator, self.task, self.n_features = estimator, task, n_features
        self.plan = self.nearest = self.varying = None
        self.outside = 0

    def start(self, n_rows: int, y_low=None, y_high=None, classes=None, box=None) -> None:
        """Set up from the fit's row count and target ranges (regression) or labels; ``box``
        (low, high) is the data's range, used where the estimator declares no domain."""
        est, n = self.estimator, self.n_features
        est._check_params()
        if n_rows < 2:
            raise ValueError(f"need at least 2 samples to fit, got n_samples = {n_rows}")
        if self.task == "classification":
            labels = np.asarray(sorted(classes))
            est.classes_ = np.unique(labels.astype(object) if labels.dtype.kind in "US" else labels)
            if est.classes_.size < 2:
                raise ValueError(f"need samples of at least 2 classes, got 1 class ({est.classes_[0]!r})")
            t = est.classes_.size
            est.output_offset_, est.output_scale_ = np.zeros(t), np.ones(t)
        else:
            t = len(y_low)
            est._y_was_1d_ = False
            est.output_offset_, est.output_scale_ = _normaliser(np.asarray(y_low), np.asarray(y_high))
        self.n_rows, self.n_targets = n_rows, t
        est.n_features_in_ = n
        if est.domain is None:
            est.domain_low_, est.domain_high_ = (np.asarray(side, dtype=np.float64) for side in box)
        else:
            est.domain_low_, est.domain_high_ = est._input_box(np.empty((0, n)))
        est.input_offset_, est.input_scale_ = _normaliser(est.domain_low_, est.domain_high_)
        self.activation = get_activation(est.activation)
        rng = check_random_state(est.random_state)
        if est.method == "data-driven":
            self.plan = plan_nodes(n_rows, t, int(est.n_nodes), rng, 0, est.n_neighbors)
            self.anchor_rows = np.empty((int(est.n_nodes), n))
            self.u_low, self.u_high = np.full(n, np.inf), np.full(n, -np.inf)
        elif est.method in DATA_FREE_METHODS:
            self.layer = GENERATORS[est.method](
                np.empty((0, n)), np.empty((0, t)), int(est.n_nodes), rng, self.activation,
                n_neighbors=est.n_neighbors, slope_scale=float(est.slope_scale),
                interval=float(est.interval))
        else:
            raise ValueError(f"method {est.method!r} cannot read its rows chunk by chunk; "
                             f"streamed fits take {['data-driven', *DATA_FREE_METHODS]}")

    def inputs(self, X: np.ndarray) -> np.ndarray:
        return (X - self.estimator.input_offset_) / self.estimator.input_scale_

    def targets(self, Y) -> np.ndarray:
        """Normalised targets of raw values (r, t) or, for classifiers, one-hot rows of labels (r,)."""
        est = self.estimator
        if self.task == "classification":
            codes = np.searchsorted(est.classes_, Y)
            onehot = np.zeros((len(Y), est.classes_.size))
            onehot[np.arange(len(Y)), codes] = 1.0
            return onehot
        return (Y - est.output_offset_) / est.output_scale_

    # pass 1 ---------------------------------------------------------------------------------
    def take_anchor_chunk(self, first: int, X: np.ndarray) -> None:
        est = self.estimator
        self.outside += int(np.sum(np.any((X < est.domain_low_) | (X > est.domain_high_), axis=1)))
        if self.plan is None or X.shape[0] == 0:
            return
        U = self.inputs(X)
        np.minimum(self.u_low, U.min(axis=0), out=self.u_low)
        np.maximum(self.u_high, U.max(axis=0), out=self.u_high)
        here = (self.plan.anchors >= first) & (self.plan.anchors < first + X.shape[0])
        self.anchor_rows[here] = U[self.plan.anchors[here] - first]

    def finish_anchors(self) -> bool:
        """After pass 1; True where a neighbour pass is needed."""
        if self.plan is None:
            self._set_layer(self.layer)
            return False
        self.varying = np.flatnonzero(self.u_high - self.u_low > 0)
        est, q = self.estimator, self.varying.size
        k = min(est.n_neighbors or default_neighbors(q), self.n_rows)
        self.plan = dataclasses.replace(self.plan, k=k)
        self.nearest = NearestRows(self.anchor_rows[:, self.varying], k, self.plan.columns)
        if q == 0:
            self.finish_neighbours()
        return q > 0

    # pass 2 ---------------------------------------------------------------------------------
    def take_neighbour_chunk(self, first: int, X: np.ndarray, Y) -> None:
        V = np.ascontiguousarray(self.inputs(X)[:, self.varying])
        self.nearest.update(V, self.targets(Y), first)

    def finish_neighbours(self) -> None:
        est = self.estimator
        self._set_layer(layer_from_neighbourhoods(self.plan, self.anchor_rows, self.varying,
                                                  self.nearest, self.activation,
                                                  float(est.slope_scale)))

    def _set_layer(self, layer) -> None:
        est = self.estimator
        est.hidden_weights_, est.hidden_biases_ = layer.weights, layer.biases
        est.diagnostics_ = {**layer.diagnostics,
                            "constant_features": int(np.sum(est.domain_high_ == est.domain_low_)),
                            "rows_outside_domain": self.outside}

    # pass 3 ---------------------------------------------------------------------------------
    def designs(self, blocks: Iterable[tuple], ranges: PreactivationRange | None) -> Iterator[tuple]:
        """(design [1, H], normalised targets) of blocks (X, Y) of raw rows."""
        est = self.estimator
        for X, Y in blocks:
            U = self.inputs(X)
            design = next(design_blocks(U, est.hidden_weights_, est.hidden_biases_, self.activation,
                                        [(0, U.shape[0])], ranges))
            yield design, self.targets(Y)

    def fit_output(self, pieces: Iterable[tuple]) -> None:
        """Pass 3 over (X, Y) pieces of all the fit's rows in order, then the output layer."""
        m = self.estimator.hidden_weights_.shape[0]
        ranges = PreactivationRange(m)
        blocks = reblock(pieces, block_bounds(self.n_rows, m))
        factor = solvers.accumulate_designs(self.designs(blocks, ranges))
        self.estimator._solve_output(factor, ranges)

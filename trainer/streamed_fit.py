"""One model fitted from rows that arrive in chunks: the passes of an estimator's fit, each taking
the rows chunk by chunk in global row order, holding O(M (n + k) + block) numbers, never O(N).

The passes, after the caller has counted the rows and measured the targets (:meth:`start`):

1. anchors: normalise each chunk, keep the input ranges, the rows outside the box, the rows of
   the anchors (drawn by global row index, :mod:`nodecast.trainer.anchors`), the evenly strided
   rows of the global trend (:func:`~nodecast.trainer.generators.data_driven.global_stride`) and
   the number of held-out check rows of the default ridge (a hash of each row's inputs,
   :class:`~nodecast.trainer.ridge_choice.CheckRows`);
2. neighbours (data-driven only): each chunk's nearest rows of every anchor, merged
   (:mod:`nodecast.trainer.neighbours`), as many as the largest k the fit may use;
3. factor, once per candidate layer (one, or the k and s candidates of
   :mod:`nodecast.trainer.layer_choice`): the rows regrouped into the very row blocks of an
   in-memory fit (:func:`nodecast.trainer.hidden.block_bounds`), hidden designs, the solver's
   factor with the check rows folded last; then the ridge and the output layer by the
   estimator's own code.

Every step is the arithmetic of :meth:`RandomNodeRegressor.fit` on the same rows in the same blocks,
so the model is the in-memory model bit for bit whatever the chunk size.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator

import numpy as np
from sklearn.utils import check_random_state

from nodecast.compiler.activations import get_activation
from nodecast.trainer import layer_choice, ridge_choice
from nodecast.trainer.check_fold import fold_blocks
from nodecast.trainer.folds import normaliser as _normaliser
from nodecast.trainer.generators import GENERATORS
from nodecast.trainer.generators.data_driven import (
    default_neighbors,
    global_slopes,
    global_stride,
    layer_from_neighbourhoods,
    plan_nodes,
)
from nodecast.trainer.hidden import DesignMaker, PreactivationRange, block_bounds
from nodecast.trainer.neighbours import NearestRows
from nodecast.trainer.solvers import single_blas_thread

# generators that read no rows, only n
DATA_FREE_METHODS = ("interval", "domain-anchored", "slope-angle", "weight-sum")


def reblock(pieces: Iterable[tuple], bounds) -> Iterator[tuple]:
    """Regroup consecutive row pieces (tuples of arrays with equal row counts) into the row blocks
    ``bounds`` ((start, stop) pairs covering 0 .. N in order)."""
    feed = BlockFeed(bounds)
    for piece in pieces:
        if feed.done:
            return
        yield from feed.push(piece)


class BlockFeed:
    """:func:`reblock` for pieces pushed one at a time (several consumers fed by one pass):
    :meth:`push` returns the blocks of ``bounds`` that the rows pushed so far complete."""

    def __init__(self, bounds) -> None:
        self.sizes = [stop - start for start, stop in bounds]
        self.next, self.pending, self.held = 0, [], 0

    @property
    def done(self) -> bool:
        return self.next == len(self.sizes)

    def push(self, piece: tuple) -> list[tuple]:
        if len(piece[0]):
            self.pending.append(piece)
            self.held += len(piece[0])
        blocks = []
        while not self.done and self.held >= self.sizes[self.next]:
            size = self.sizes[self.next]
            joined = tuple(np.concatenate(parts) if len(self.pending) > 1 else parts[0]
                           for parts in zip(*self.pending, strict=True))
            blocks.append(tuple(part[:size] for part in joined))
            rest = tuple(part[size:] for part in joined)
            self.pending, self.held = ([rest], len(rest[0])) if len(rest[0]) else ([], 0)
            self.next += 1
        return blocks


class StreamedFit:
    """The state of one estimator's fit between passes (see the module's docstring)."""

    def __init__(self, estimator, task: str, n_features: int) -> None:
        self.estimator, self.task, self.n_features = estimator, task, n_features
        self.plan = self.nearest = self.varying = self.checked = self.layer = None
        self.outside = self.check_count = 0

    def start(self, n_rows: int, y_low=None, y_high=None, classes=None, box=None) -> None:
        """Set up from the fit's row count and target ranges (regression) or labels; ``box``
        (low, high) is the data's range, used where the estimator declares no domain."""
        est, n = self.estimator, self.n_features
        est._check_params()
        if n_rows < 2:
            raise ValueError(f"need at least 2 samples to fit, got n_samples = {n_rows}")
        t = self._set_targets(y_low, y_high, classes)
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
            self.plan = plan_nodes(n_rows, t, int(est.n_nodes), rng)
            self.anchor_rows = np.empty((int(est.n_nodes), n))
            self.u_low, self.u_high = np.full(n, np.inf), np.full(n, -np.inf)
        elif est.method in DATA_FREE_METHODS:
            self.layer = GENERATORS[est.method](
                np.empty((0, n)), np.empty((0, t)), int(est.n_nodes), rng, self.activation,
                interval=float(est.interval), angle_range=tuple(est.angle_range),
                weight_sum=tuple(est.weight_sum))
        else:
            raise ValueError(f"method {est.method!r} cannot read its rows chunk by chunk; "
                             f"streamed fits take {['data-driven', *DATA_FREE_METHODS]}")
        fraction = float(est.check_fraction)
        if ridge_choice.enough_rows(n_rows, fraction):
            self.checked = ridge_choice.check_plan(n_rows, rng, fraction)
        self.stride = global_stride(n_rows)
        self.strided_x, self.strided_u, self.strided_t = [], [], []  # rows 0, stride, 2 stride ..

    def _set_targets(self, y_low, y_high, classes) -> int:
        est = self.estimator
        if self.task == "classification":
            labels = np.asarray(sorted(classes))
            est.classes_ = np.unique(labels.astype(object) if labels.dtype.kind in "US" else labels)
            if est.classes_.size < 2:
                raise ValueError(f"need samples of at least 2 classes, got 1 class ({est.classes_[0]!r})")
            t = est.classes_.size
            est.output_offset_, est.output_scale_ = np.zeros(t), np.ones(t)
            return t
        est._y_was_1d_ = False
        est.output_offset_, est.output_scale_ = _normaliser(np.asarray(y_low), np.asarray(y_high))
        return len(y_low)

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
    def take_anchor_chunk(self, first: int, X: np.ndarray, Y) -> None:
        est = self.estimator
        self.outside += int(np.sum(np.any((X < est.domain_low_) | (X > est.domain_high_), axis=1)))
        if X.shape[0] == 0:
            return
        U = self.inputs(X)
        if self.checked is not None:
            self.check_count += int(self.checked.mask(U).sum())
        strided = np.arange(-first % self.stride, X.shape[0], self.stride)
        self.strided_x.append(X[strided])
        if self.plan is None:
            return
        np.minimum(self.u_low, U.min(axis=0), out=self.u_low)
        np.maximum(self.u_high, U.max(axis=0), out=self.u_high)
        here = (self.plan.anchors >= first) & (self.plan.anchors < first + X.shape[0])
        self.anchor_rows[here] = U[self.plan.anchors[here] - first]
        self.strided_u.append(U[strided])
        self.strided_t.append(self.targets(Y[strided]))

    def finish_anchors(self, neighbour_counts: Callable | None = None) -> bool:
        """After pass 1; True where a neighbour pass is needed. ``neighbour_counts(q)`` gives the
        k the neighbour pass must serve for q varying features (default: the fit's own, see
        :meth:`neighbour_counts`; model selection serves every k of its grid)."""
        if self.checked is not None and not ridge_choice.check_usable(
                self.check_count, self.n_rows, float(self.estimator.check_fraction)):
            self.checked = None
        if self.plan is None:
            return False
        self.varying = np.flatnonzero(self.u_high - self.u_low > 0)
        if self.varying.size == 0:
            return False
        V = np.ascontiguousarray(np.concatenate(self.strided_u)[:, self.varying])
        self.prior = global_slopes(V, np.concatenate(self.strided_t), strided=True)[
            self.plan.columns]
        self.strided_u = self.strided_t = None
        counts = (neighbour_counts(self.varying.size) if neighbour_counts
                  else self.neighbour_counts())
        self.nearest = NearestRows(self.anchor_rows[:, self.varying], max(counts), self.plan.columns)
        return True

    def neighbour_counts(self) -> list[int]:
        """The k the fit may use: the candidates of the search, or the one given."""
        q, k = self.varying.size, self.estimator.n_neighbors
        if k == "auto":
            return layer_choice.neighbor_candidates(q, self.n_rows)
        return [min(k or default_neighbors(q), self.n_rows)]

    # pass 2 ---------------------------------------------------------------------------------
    def take_neighbour_chunk(self, first: int, X: np.ndarray, Y) -> None:
        V = np.ascontiguousarray(self.inputs(X)[:, self.varying])
        self.nearest.update(V, self.targets(Y), first)

    # pass 3 ---------------------------------------------------------------------------------
    def layer_for(self, n_neighbors, slope_scale):
        """The hidden layer a fit with these settings draws (no pass over the rows)."""
        if self.plan is None:
            return self.layer
        q = self.varying.size
        k = min(n_neighbors or default_neighbors(q), self.n_rows)
        return layer_from_neighbourhoods(self.plan, self.anchor_rows, self.varying, k,
                                            self.nearest, getattr(self, "prior", None),
                                            self.activation, float(slope_scale))

    def fold(self, layer, pieces: Iterable[tuple], bounds) -> tuple:
        """(factor, ranges, check data) of ``layer`` over (X, Y) pieces of rows in order,
        regrouped into the row blocks ``bounds``."""
        ranges = PreactivationRange(layer.weights.shape[0])
        make = DesignMaker(layer.weights, layer.biases, self.activation, ranges)
        blocks = ((self.inputs(X), self.targets(Y)) for X, Y in reblock(pieces, bounds))
        with single_blas_thread():
            factor, check = fold_blocks(blocks, make, self.checked)
        return factor, ranges, check

    def fit_output(self, factor_pass: Callable) -> None:
        """The layer (searching k and s where "auto"), its factor by ``factor_pass(layer) ->
        (factor, ranges, check)``, one pass over the rows each, then the output layer."""
        est = self.estimator

        def fit_layer(n_neighbors, slope_scale):
            layer = self.layer_for(n_neighbors, slope_scale)
            return est._layer_fit(layer, *factor_pass(layer))

        auto = est.method == "data-driven" and "auto" in (est.n_neighbors, est.slope_scale)
        if not auto:
            scale = 1.0 if est.slope_scale == "auto" else est.slope_scale
            fit = fit_layer(est.n_neighbors, scale)
            est.layer_choice_ = {"rule": "given"}
            est.slope_scale_ = None if est.method != "data-driven" else float(est.slope_scale)
        else:
            q = 0 if self.varying is None else self.varying.size
            fit, _, s, est.layer_choice_ = layer_choice.choose(
                fit_layer, est.n_neighbors, est.slope_scale, est._candidate_score, q, self.n_rows)
            est.slope_scale_ = float(s)
        est.diagnostics_ = {**fit.layer.diagnostics,
                            "constant_features": int(np.sum(est.domain_high_ == est.domain_low_)),
                            "rows_outside_domain": self.outside}
        est._solve_output(fit)

    def fit_chunks(self, chunks: Callable) -> None:
        """Pass 3 for rows read locally: ``chunks()`` yields (X, Y) pieces of all the fit's rows in
        order, once per candidate layer."""
        m = int(self.estimator.n_nodes)
        self.fit_output(lambda layer: self.fold(layer, chunks(), block_bounds(self.n_rows, m)))

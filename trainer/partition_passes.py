"""What each partition computes in a cluster fit: small, pure functions of one partition's rows and
a description of the fit, whose results the client merges (:mod:`nodecast.trainer.distributed`).

A partition is a pair (X of shape (r, n) float64, Y of shape (r, t) float64 or labels of shape (r,)),
with ``first``, the global index of its first row (within the rows a fit uses).
"""

from __future__ import annotations

import copy

import numpy as np

from nodecast.trainer import solvers
from nodecast.trainer.check_fold import fold_outside_check
from nodecast.trainer.domain_stats import DomainStats
from nodecast.trainer.hidden import DesignMaker, PreactivationRange, block_bounds
from nodecast.trainer.metrics import MetricSums
from nodecast.trainer.row_hash import held_out
from nodecast.trainer.row_stats import RowStats, check_finite_from
from nodecast.trainer.streamed_fit import StreamedFit


def rows_of(part, which: str, first: int, fraction: float, seed: int):
    """(X, Y) of the partition's rows ``which``: "all", "kept" (not held out) or "held"."""
    X, Y = part
    if which == "all":
        return X, Y
    held = held_out(first, X.shape[0], fraction, seed)
    keep = held if which == "held" else ~held
    return X[keep], Y[keep]


def count(part) -> int:
    return int(part[0].shape[0])


def stats(part, first: int, features, targets, declared, classify: bool, fraction: float,
          seed: int):
    """(DomainStats, RowStats of all rows, RowStats of the kept rows, first target row or None)."""
    X, Y = part
    domain = DomainStats(features, declared)
    domain.update(first, X)
    if not classify:
        check_finite_from(first, Y, targets, "target")
    every, kept = RowStats(), RowStats()
    every.update(Y, Y if classify else None)
    keep = ~held_out(first, X.shape[0], fraction, seed)
    kept.update(Y[keep], Y[keep] if classify else None)
    return domain, every, kept, (Y[0] if len(Y) and not classify else None)


def anchors(part, first: int, fit: StreamedFit, which):
    """The partition's share of pass 1: a copy of ``fit`` that has taken in the partition's rows
    (rows outside, input ranges, anchor rows, strided rows, check-row count) and nothing else."""
    fit = copy.copy(fit)
    fit.outside = fit.check_count = 0
    fit.strided_x, fit.strided_u, fit.strided_t = [], [], []
    if fit.plan is not None:
        fit.u_low, fit.u_high = np.full_like(fit.u_low, np.inf), np.full_like(fit.u_high, -np.inf)
        fit.anchor_rows = np.full_like(fit.anchor_rows, np.nan)
    X, Y = rows_of(part, *which)
    fit.take_anchor_chunk(first, X, Y)
    fit.estimator = None  # the client keeps the estimator
    return fit


def neighbours(part, first: int, fit: StreamedFit, which):
    """The partition's candidates for every anchor's k nearest rows (a NearestRows)."""
    fit = copy.copy(fit)
    fit.nearest = copy.deepcopy(fit.nearest)
    X, Y = rows_of(part, *which)
    fit.take_neighbour_chunk(first, X, Y)
    return fit.nearest


def factor(part, fit: StreamedFit, layer, which):
    """(factor of the partition's design rows outside the check set or None, the check rows'
    designs, their targets, pre-activation ranges), the rows in the row blocks of an in-memory fit
    of the partition alone."""
    X, Y = rows_of(part, *which)
    m = layer.weights.shape[0]
    ranges = PreactivationRange(m)
    make = DesignMaker(layer.weights, layer.biases, fit.activation, ranges)
    blocks = ((fit.inputs(X[a:b]), fit.targets(Y[a:b])) for a, b in block_bounds(X.shape[0], m))
    with solvers.single_blas_thread():
        rest, design, targets = fold_outside_check(blocks, make, fit.checked)
    if targets is None:
        targets = np.empty((0, fit.n_targets))
    return rest, design, targets, ranges


def combine(left, right):
    """Two partitions' :func:`factor` results into one, left rows first: the R factors stacked and
    reduced by one Householder QR (a node of the TSQR tree), the check rows concatenated, the
    ranges by min and max."""
    (fa, da, ta, ra), (fb, db, tb, rb) = left, right
    ranges = PreactivationRange(ra.low.size)
    ranges.low, ranges.high = np.minimum(ra.low, rb.low), np.maximum(ra.high, rb.high)
    design, targets = np.concatenate([da, db]), np.concatenate([ta, tb])
    return combine_factors(fa, fb), design, targets, ranges


def combine_factors(fa, fb):
    """The factor of the rows of two factors (either may be None: no rows), ``fa``'s rows first:
    [R_a; R_b] reduced by one Householder QR."""
    if fa is None or fb is None:
        return fa if fb is None else fb
    with solvers.single_blas_thread():
        R, qty = solvers._householder_update(fa.R, fa.qty, fb.R, fb.qty)
    return solvers.QRFactor(np.ascontiguousarray(R), qty, fa.n_rows + fb.n_rows,
                            fa.y_squares + fb.y_squares)


def figures(part, model, task: str, which):
    """The partition's MetricSums of ``model`` on its rows ``which``."""
    X, Y = rows_of(part, *which)
    sums = MetricSums(task)
    for a, b in block_bounds(X.shape[0], model.hidden_weights_.shape[0], growing=False):
        sums.update(model.predict(X[a:b]), Y[a:b])
    return sums

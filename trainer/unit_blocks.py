"""The arithmetic of one model-selection unit (one fold, one hidden layer) on rows that arrive in
pieces: the QR factor of [1, H] over the fold's training rows, and the validation sums of every
(ridge, M) over the fold's validation rows, each in fixed row blocks.

The in-memory search pushes a fold's rows as one piece, the streamed search chunk by chunk and a
cluster partition by partition; the pieces are regrouped into the same blocks
(:class:`~nodecast.trainer.streamed_fit.BlockFeed`), so in memory and streamed every rounding is
the same and the scores agree byte for byte. Everything runs on one BLAS thread (the same bits on
any machine and for any number of parallel units).
"""

from __future__ import annotations

import numpy as np

from nodecast.trainer import solvers
from nodecast.trainer.hidden import DesignMaker, block_bounds
from nodecast.trainer.streamed_fit import BlockFeed

PROBABILITY_FLOOR = 1e-3  # class scores are clipped to [floor, 1] for the log-loss


class DesignBuffer:
    """One buffer for the designs of many units (they all have max(M) + 1 columns), so that a
    search holding dozens of units holds one block of designs, not one per unit."""

    def __init__(self) -> None:
        self.array = None

    def design(self, make: DesignMaker, U: np.ndarray) -> np.ndarray:
        if self.array is not None and self.array.shape[1] == make.buffer.shape[1]:
            make.buffer = self.array
        design = make(U)
        self.array, make.buffer = make.buffer, make.buffer[:0]
        return design


class UnitFold:
    """The factor of [1, H] of a layer over ``n_rows`` training rows pushed in order, folded in
    the row blocks of a fit (:func:`~nodecast.trainer.hidden.block_bounds`)."""

    def __init__(self, layer, activation, n_rows: int, shared: DesignBuffer | None = None) -> None:
        self.feed = BlockFeed(block_bounds(n_rows, layer.weights.shape[0]))
        self.make = DesignMaker(layer.weights, layer.biases, activation)
        self.shared = shared or DesignBuffer()
        self.factor = None

    def push(self, U: np.ndarray, T: np.ndarray) -> None:
        """Normalised inputs U (r, n) and targets T (r, t) of the next rows."""
        with solvers.single_blas_thread():
            for U_block, T_block in self.feed.push((U, T)):
                design = self.shared.design(self.make, U_block)
                self.factor = solvers.accumulate_designs([(design, T_block)], start=self.factor)


def solutions_of(factor, ridges, nodes) -> list:
    """Per ridge, per M: (output weights (M, t), bias (t,)) from one factorisation per ridge."""
    from nodecast.trainer.prefix_solve import prefix_solutions

    with solvers.single_blas_thread():
        return [prefix_solutions(factor, ridge, nodes) for ridge in ridges]


class ValidationSums:
    """Sums of one unit's errors on ``n_rows`` validation rows pushed in order, for every (ridge,
    M), each summed over fixed blocks of those rows and the blocks added in order.

    scoring : "rmse" (regression: ``target`` = (offset, scale) of the fold's target scaling, rows
    pushed with their targets in target units), or "accuracy" / "log-loss" (rows pushed with
    their class codes). :meth:`merge` adds the sums of other rows (a cluster partition's).
    """

    def __init__(self, layer, activation, solutions, nodes, n_rows: int, scoring: str,
                 target=None, shared: DesignBuffer | None = None) -> None:
        self.feed = BlockFeed(block_bounds(n_rows, layer.weights.shape[0], growing=False))
        self.make = DesignMaker(layer.weights, layer.biases, activation)
        self.shared, self.solutions, self.nodes = shared or DesignBuffer(), solutions, tuple(nodes)
        self.scoring, self.target, self.rows = scoring, target, 0
        shape = (len(solutions), len(self.nodes))
        if scoring == "rmse":
            t = solutions[0][0][0].shape[1]
            self.squares, self.largest = np.zeros(shape + (t,)), np.zeros(shape + (t,))
        else:
            self.total = np.zeros(shape)

    def push(self, U: np.ndarray, Y: np.ndarray) -> None:
        with solvers.single_blas_thread():
            for U_block, Y_block in self.feed.push((U, Y)):
                design = self.shared.design(self.make, U_block)
                self.rows += len(U_block)
                for r, row in enumerate(self.solutions):
                    for p, (m, (beta, bias)) in enumerate(zip(self.nodes, row, strict=True)):
                        self._add(r, p, design[:, 1 : m + 1] @ beta + bias, Y_block)

    def _add(self, r: int, p: int, out: np.ndarray, Y: np.ndarray) -> None:
        if self.scoring == "rmse":
            offset, scale = self.target
            error = offset + scale * out - Y
            self.squares[r, p] += np.sum(error**2, axis=0)
            np.maximum(self.largest[r, p], np.max(np.abs(error), axis=0), out=self.largest[r, p])
        else:
            self.total[r, p] += class_sum(out, Y, self.scoring)

    def merge(self, other: ValidationSums) -> None:
        self.rows += other.rows
        if self.scoring == "rmse":
            self.squares += other.squares
            np.maximum(self.largest, other.largest, out=self.largest)
        else:
            self.total += other.total

    def values(self):
        """Regression: (RMSE, largest error), each (ridges, nodes, t); classification: the
        accuracy or the mean log-loss, (ridges, nodes)."""
        if self.scoring == "rmse":
            return np.sqrt(self.squares / self.rows), self.largest
        return self.total / self.rows


def class_sum(scores: np.ndarray, codes: np.ndarray, scoring: str) -> float:
    """Over rows of class scores (rows, n_classes): the number of rows whose highest score is
    their class (ties: the first class), or the sum of -ln p(true class) with the scores clipped
    to [``PROBABILITY_FLOOR``, 1] and divided by their sum."""
    if scoring == "accuracy":
        return float(np.count_nonzero(np.argmax(scores, axis=1) == codes))
    probabilities = np.clip(scores, PROBABILITY_FLOOR, 1.0)
    probabilities /= probabilities.sum(axis=1, keepdims=True)
    return float(-np.sum(np.log(probabilities[np.arange(codes.size), codes])))

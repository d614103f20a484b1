"""Cross-validation folds by a hash of each row's input values, and the per-split data of one
fold as the estimators would see it.

Nothing of a fold's validation rows reaches what is scored on them: the input box (where the
domain is not declared), the target scaling and the hidden layer all come from the fold's training
rows. The normalisation repeats the estimators' own arithmetic bit for bit, so a hidden layer drawn
here equals the one ``RandomNodeRegressor(random_state=seed, domain=box).fit`` draws on the same
rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.utils import check_random_state

from nodecast.compiler.activations import get_activation
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.generators import GENERATORS, HiddenLayer
from nodecast.trainer.row_hash import content_hash


def fold_key(seed: int) -> int:
    """The hash key of the folds of ``seed``: the second draw of ``RandomState(seed)`` (the first
    keys the held-out rows of :func:`nodecast.trainer.row_hash.held_out`)."""
    return int(np.random.RandomState(seed % 2**32).randint(2**62, size=2, dtype=np.int64)[1])


def row_folds(X: np.ndarray, folds: int, seed: int) -> np.ndarray:
    """The fold of each row of X (rows, n), ndarray of shape (rows,) of int64: the content hash of
    the row's input values under :func:`fold_key` (:func:`nodecast.trainer.row_hash.content_hash`)
    modulo ``folds``. A row's fold depends on its values alone: the same in memory, chunk by chunk
    and on cluster partitions, and copies of a row share one fold (no copy of a validation row is
    trained on)."""
    hashed = content_hash(np.asarray(X, dtype=np.float64).reshape(len(X), -1), fold_key(seed))
    return (hashed % np.uint64(folds)).astype(np.int64)


def check_folds(folds, n_rows: int) -> None:
    """NodecastError unless ``folds`` is an integer from 2 to ``n_rows``."""
    if not (isinstance(folds, (int, np.integer)) and 2 <= folds <= n_rows):
        raise NodecastError(f"folds must be an integer from 2 to the number of rows ({n_rows}), "
                            f"got {folds!r}")


class FoldSizeError(NodecastError):
    """A hashed fold without validation rows or with fewer than 2 training rows (small or very
    repetitive data): fewer folds may do (the command line's default tries them)."""

    def __init__(self, fold: int, folds: int, rows: int, n_rows: int) -> None:
        self.numbers = (fold, folds, rows, n_rows)
        self.where = f"fold {fold} of {folds} gets {rows} of the {n_rows} rows"
        super().__init__(f"{self.where} (a row's fold comes from a hash of its input values, equal "
                         "rows share one); use fewer --folds or more rows")

    def __reduce__(self):  # rebuilt from its numbers where it crosses a process boundary
        return FoldSizeError, self.numbers


def check_fold_sizes(counts, n_rows: int) -> None:
    """FoldSizeError naming the first fold without validation rows or with fewer than 2 training
    rows; ``counts`` holds each fold's rows."""
    for fold, rows in enumerate(np.asarray(counts).tolist()):
        if rows == 0 or n_rows - rows < 2:
            raise FoldSizeError(fold + 1, len(counts), int(rows), n_rows)


def fold_indices(X: np.ndarray, folds: int, seed: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Hashed k-fold splits of the rows of X: list of (training rows, validation rows), index
    arrays in row order; every row is validated exactly once (:func:`row_folds`). Fold sizes are
    about N / folds each (multinomial, not equal); NodecastError for a fold left empty."""
    n_rows = len(X)
    check_folds(folds, n_rows)
    ids = row_folds(X, folds, seed)
    check_fold_sizes(np.bincount(ids, minlength=folds), n_rows)
    return [(np.flatnonzero(ids != fold), np.flatnonzero(ids == fold)) for fold in range(folds)]


def input_box(X: np.ndarray, declared_low: np.ndarray, declared_high: np.ndarray):
    """The box (low, high) of shape (n_features,) each: declared bounds where they are finite, the
    rows' own min and max where the declared bound is NaN (not declared)."""
    low = np.where(np.isnan(declared_low), X.min(axis=0), declared_low)
    high = np.where(np.isnan(declared_high), X.max(axis=0), declared_high)
    return low, high


def normaliser(low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Offset and scale mapping [low, high] onto [0, 1] (a zero-width range keeps scale 1), the same
    arithmetic as the estimators."""
    span = high - low
    return low.copy(), np.where(span > 0, span, 1.0)


@dataclass(frozen=True, eq=False)
class SplitData:
    """One fold in normalised coordinates.

    U_train : ndarray of shape (n_train, n_features); T_train : ndarray of shape (n_train, t).
    U_valid : ndarray of shape (n_valid, n_features); Y_valid : ndarray of shape (n_valid, t), in
    target units. low, high, input_offset, input_scale : ndarray of shape (n_features,).
    output_offset, output_scale : ndarray of shape (t,).
    """

    U_train: np.ndarray
    T_train: np.ndarray
    U_valid: np.ndarray
    Y_valid: np.ndarray
    low: np.ndarray
    high: np.ndarray
    input_offset: np.ndarray
    input_scale: np.ndarray
    output_offset: np.ndarray
    output_scale: np.ndarray


def split_data(X, Y, train, valid, declared_low, declared_high) -> SplitData:
    """Normalise one split by its training rows only (see the module docstring)."""
    X_train, Y_train = X[train], Y[train]
    low, high = input_box(X_train, declared_low, declared_high)
    input_offset, input_scale = normaliser(low, high)
    output_offset, output_scale = normaliser(Y_train.min(axis=0), Y_train.max(axis=0))
    return SplitData(
        U_train=(X_train - input_offset) / input_scale,
        T_train=(Y_train - output_offset) / output_scale,
        U_valid=(X[valid] - input_offset) / input_scale, Y_valid=Y[valid],
        low=low, high=high, input_offset=input_offset, input_scale=input_scale,
        output_offset=output_offset, output_scale=output_scale)


def draw_layer(U, T, n_nodes: int, seed: int, activation: str, n_neighbors: int | None = None,
               slope_scale: float = 1.0, method: str = "data-driven", **generator) -> HiddenLayer:
    """The hidden layer an estimator with these settings and ``random_state=seed`` draws on the
    normalised rows U of shape (N, n) with normalised targets T of shape (N, t); ``generator``
    holds the other generators' settings (``interval``, ``angle_range``, ``weight_sum``)."""
    return GENERATORS[method](U, T, n_nodes, check_random_state(seed), get_activation(activation),
                              n_neighbors=n_neighbors, slope_scale=slope_scale, **generator)


def hidden_outputs(layer: HiddenLayer, U: np.ndarray, activation: str, n_nodes: int | None = None):
    """Activations of the first ``n_nodes`` nodes (all by default), shape (N, n_nodes)."""
    weights, biases = layer.weights[:n_nodes], layer.biases[:n_nodes]
    return get_activation(activation).function(U @ weights.T + biases)

"""Cross-validation folds, and the per-split data of one fold as the estimators would see it.

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


def fold_indices(n_rows: int, folds: int, seed: int) -> list[tuple[np.ndarray, np.ndarray]]:
    """Shuffled k-fold splits: list of (training rows, validation rows), index arrays in row order.

    The rows are permuted by ``RandomState(seed)`` and cut into ``folds`` parts whose sizes differ
    by at most one; every row is validated exactly once.
    """
    if not (isinstance(folds, (int, np.integer)) and 2 <= folds <= n_rows):
        raise NodecastError(f"folds must be an integer from 2 to the number of rows ({n_rows}), "
                         f"got {folds!r}")
    parts = np.array_split(np.random.RandomState(seed).permutation(n_rows), folds)
    splits = []
    for i, valid in enumerate(parts):
        train = np.concatenate([part for j, part in enumerate(parts) if j != i])
        splits.append((np.sort(train), np.sort(valid)))
    return splits


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

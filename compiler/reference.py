"""The reference predictor: float64 NumPy evaluation of the IR, the ground truth for every artifact."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.ir import Network

_BLOCK_ROWS = 8192


def as_rows(net: Network, X) -> np.ndarray:
    """Return ``X`` as a float64 array of shape (n_rows, n_inputs), or raise ValueError.

    A row holds the numeric features, then one level code per categorical input (see ir.py)."""
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X.reshape(1, -1)
    if X.ndim != 2 or X.shape[1] != net.n_inputs:
        levels = f" and {net.n_categorical} level codes" if net.n_categorical else ""
        raise ValueError(f"expected rows of {net.n_features} features{levels}, got an array of "
                         f"shape {X.shape}")
    return X


def level_codes(net: Network, X: np.ndarray) -> np.ndarray:
    """The level codes of rows ``X`` as integers of shape (n_rows, n_categorical); -1 for a code
    that names no level (negative, too large, fractional or NaN)."""
    raw = X[:, net.n_features:]
    sizes = np.array([len(group) for group in net.categorical_levels], dtype=np.float64)
    with np.errstate(invalid="ignore"):
        known = (raw >= 0) & (raw < sizes) & (raw == np.floor(raw))
    return np.where(known, np.nan_to_num(raw), -1).astype(np.int64)


def clamp_to_domain(net: Network, X: np.ndarray) -> np.ndarray:
    """Clip every feature into the declared domain (NaN stays NaN); an unknown level becomes
    level 0."""
    out = np.array(X, dtype=np.float64)
    out[:, : net.n_features] = np.clip(X[:, : net.n_features], net.domain_low, net.domain_high)
    if net.n_categorical:
        out[:, net.n_features:] = np.maximum(level_codes(net, X), 0)
    return out


def outside_domain(net: Network, X: np.ndarray) -> np.ndarray:
    """Boolean mask of the rows with a feature outside the declared domain (NaN counts as outside)
    or an unknown level."""
    numbers = X[:, : net.n_features]
    inside = np.all((numbers >= net.domain_low) & (numbers <= net.domain_high), axis=1)
    if net.n_categorical:
        inside &= np.all(level_codes(net, X) >= 0, axis=1)
    return ~inside


def level_contribution(net: Network, X: np.ndarray) -> np.ndarray:
    """Sum of the level vectors of each row's levels, shape (n_rows, n_nodes); an unknown level
    adds nothing (the all-zero one-hot)."""
    total = np.zeros((X.shape[0], net.n_nodes))
    codes = level_codes(net, X)
    for c in range(net.n_categorical):
        known = codes[:, c] >= 0
        total[known] += net.level_weights[net.level_start(c) + codes[known, c]]
    return total


def hidden_layer(net: Network, X: np.ndarray) -> np.ndarray:
    """Pre-activations Z of shape (n_rows, n_nodes) for raw input rows X."""
    U = (X[:, : net.n_features] - net.input_offset) / net.input_scale
    Z = U @ net.hidden_weights.T + net.hidden_biases
    return Z + level_contribution(net, X) if net.n_categorical else Z


def predict(net: Network, X, out_of_domain: str = "pass") -> np.ndarray:
    """Outputs of shape (n_rows, n_outputs) in target units (classifiers: per-class scores).

    ``out_of_domain`` is "pass" (evaluate as given) or "clamp" (clip into the domain first), the
    same meaning the back-ends give these policies.
    """
    X = as_rows(net, X)
    if out_of_domain == "clamp":
        X = clamp_to_domain(net, X)
    elif out_of_domain not in ("pass", "reject"):
        raise ValueError(f"out_of_domain must be 'pass', 'clamp' or 'reject', got {out_of_domain!r}")
    g = get_activation(net.activation).function
    out = np.empty((X.shape[0], net.n_outputs))
    for start in range(0, X.shape[0], _BLOCK_ROWS):
        H = g(hidden_layer(net, X[start : start + _BLOCK_ROWS]))
        out[start : start + _BLOCK_ROWS] = H @ net.output_weights + net.output_bias
    return net.output_offset + net.output_scale * out


def predict_labels(net: Network, X, out_of_domain: str = "pass") -> np.ndarray:
    """Class labels (original text) of the highest score; classifiers only."""
    if net.task != "classification":
        raise ValueError("predict_labels needs a classification network")
    scores = predict(net, X, out_of_domain)
    return np.asarray(net.class_labels, dtype=object)[np.argmax(scores, axis=1)]

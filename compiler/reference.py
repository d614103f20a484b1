"""The reference predictor: float64 NumPy evaluation of the IR, the ground truth for every artifact."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.ir import Network

_BLOCK_ROWS = 8192


def as_rows(net: Network, X) -> np.ndarray:
    """Return ``X`` as a float64 array of shape (n_rows, n_features), or raise ValueError."""
    X = np.asarray(X, dtype=np.float64)
    if X.ndim == 1:
        X = X.reshape(1, -1)
    if X.ndim != 2 or X.shape[1] != net.n_features:
        raise ValueError(f"expected rows of {net.n_features} features, got an array of shape {X.shape}")
    return X


def clamp_to_domain(net: Network, X: np.ndarray) -> np.ndarray:
    """Clip every feature into the declared domain (NaN stays NaN)."""
    return np.clip(X, net.domain_low, net.domain_high)


def outside_domain(net: Network, X: np.ndarray) -> np.ndarray:
    """Boolean mask of the rows with a feature outside the declared domain (NaN counts as outside)."""
    inside = (X >= net.domain_low) & (X <= net.domain_high)
    return ~np.all(inside, axis=1)


def hidden_layer(net: Network, X: np.ndarray) -> np.ndarray:
    """Pre-activations Z of shape (n_rows, n_nodes) for raw inputs X."""
    U = (X - net.input_offset) / net.input_scale
    return U @ net.hidden_weights.T + net.hidden_biases


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

"""Domain-anchored baseline: random weights from U(-u, u), and each bias chosen so that the node's
inflection point sits at a random point p of the input box (the unit box in normalised
coordinates): b = z0 - a.p."""

from __future__ import annotations

import numpy as np

from nodecast.trainer.generators.base import HiddenLayer


def generate(U, T, n_nodes, rng, activation, *, interval=1.0, **_unused) -> HiddenLayer:
    """Layer of ``n_nodes`` nodes for inputs U of shape (N, n); ``T`` unused."""
    n = U.shape[1]
    weights = rng.uniform(-interval, interval, size=(n_nodes, n))
    points = rng.uniform(0.0, 1.0, size=(n_nodes, n))
    biases = activation.inflection - np.einsum("ij,ij->i", weights, points)
    return HiddenLayer(weights, biases)

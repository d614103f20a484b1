"""Fixed-interval baseline: weights and biases drawn from U(-u, u) (u = 1 is the customary default)."""

from __future__ import annotations

import numpy as np

from nodecast.trainer.generators.base import HiddenLayer


def generate(U, T, n_nodes, rng, activation, *, interval=1.0, **_unused) -> HiddenLayer:
    n = U.shape[1]
    weights = rng.uniform(-interval, interval, size=(n_nodes, n))
    biases = rng.uniform(-interval, interval, size=n_nodes)
    return HiddenLayer(weights, biases)

"""Fixed-interval baseline: weights and biases drawn from U(-u, u), in normalised coordinates
(u = 1 is the customary default, known to fail on non-linear maps: most nodes are nearly linear
over the unit box). ``select --method interval --intervals ..`` tunes u by cross-validation."""

from __future__ import annotations

from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.generators.streams import streams


def generate(U, T, n_nodes, rng, activation, *, interval=1.0, **_unused) -> HiddenLayer:
    """Layer of ``n_nodes`` nodes for inputs U of shape (N, n); ``T`` and ``activation`` unused."""
    n = U.shape[1]
    weight_rng, bias_rng = streams(rng, 2)
    weights = weight_rng.uniform(-interval, interval, size=(n_nodes, n))
    biases = bias_rng.uniform(-interval, interval, size=n_nodes)
    return HiddenLayer(weights, biases)

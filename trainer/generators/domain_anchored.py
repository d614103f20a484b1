"""Domain-anchored baseline: random weights from U(-u, u), and each bias chosen so that the node's
inflection point sits at a random point p of the input box (the unit box in normalised
coordinates): b = z0 - a.p."""

from __future__ import annotations

from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.generators.streams import box_points, streams, through_points


def generate(U, T, n_nodes, rng, activation, *, interval=1.0, **_unused) -> HiddenLayer:
    """Layer of ``n_nodes`` nodes for inputs U of shape (N, n); ``T`` unused."""
    n = U.shape[1]
    weight_rng, point_rng = streams(rng, 2)
    weights = weight_rng.uniform(-interval, interval, size=(n_nodes, n))
    return HiddenLayer(weights, through_points(weights, box_points(point_rng, n_nodes, n), activation))

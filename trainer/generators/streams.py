"""Independent random streams for the generators, so that a draw of M nodes is the prefix of the
draw of more nodes with the same seed (what model selection relies on to score every M from one
draw): each quantity (weights, biases, points, ...) comes from a stream of its own, drawn as an
array of one row per node, and a legacy RandomState yields the same leading values whatever the
array's length."""

from __future__ import annotations

import numpy as np


def streams(rng: np.random.RandomState, count: int) -> list[np.random.RandomState]:
    """``count`` generators seeded from ``rng`` (one draw of ``count`` seeds)."""
    return [np.random.RandomState(seed) for seed in rng.randint(2**31 - 1, size=count)]


def box_points(rng: np.random.RandomState, n_nodes: int, n_features: int) -> np.ndarray:
    """Points drawn uniformly from the unit box, shape (n_nodes, n_features)."""
    return rng.uniform(0.0, 1.0, size=(n_nodes, n_features))


def through_points(weights: np.ndarray, points: np.ndarray, activation) -> np.ndarray:
    """Biases that put each node's inflection hyperplane a.u + b = z0 through its point:
    b = z0 - a.p."""
    return activation.inflection - np.einsum("ij,ij->i", weights, points)

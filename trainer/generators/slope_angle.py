"""Slope-angle generator: each node's steepness is set by the angle of its sigmoid at the
inflection point (after Dudek 2019, see docs/training.md).

For node j: an angle alpha_j ~ U(alpha_min, alpha_max) (degrees, 0 <= alpha_min <= alpha_max < 90),
a direction d_j uniform on the unit sphere (a normalised standard normal vector: a random rotation),
and a point p_j uniform in the unit box. The gradient of g(a.u + b) on the inflection hyperplane is
g'(z0) a, so a_j = tan(alpha_j) / g'(z0) * d_j gives the node the slope tan(alpha_j) along d_j, and
b_j = z0 - a_j.p_j puts the hyperplane through p_j, inside the box.
"""

from __future__ import annotations

import numpy as np

from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.generators.streams import box_points, streams, through_points

DEFAULT_ANGLES = (0.0, 70.0)  # degrees; the best of the default grid on Franke's function


def unit_directions(rng: np.random.RandomState, n_nodes: int, n_features: int) -> np.ndarray:
    """Directions uniform on the unit sphere, shape (n_nodes, n_features); a (vanishingly rare) zero
    draw becomes the first axis."""
    directions = rng.standard_normal((n_nodes, n_features))
    norms = np.linalg.norm(directions, axis=1, keepdims=True)
    directions[norms[:, 0] == 0, 0] = 1.0
    return directions / np.where(norms > 0, norms, 1.0)


def generate(U, T, n_nodes, rng, activation, *, angle_range=DEFAULT_ANGLES, **_unused) -> HiddenLayer:
    """Layer of ``n_nodes`` nodes for inputs U of shape (N, n); ``T`` unused."""
    n = U.shape[1]
    low, high = np.radians(np.asarray(angle_range, dtype=np.float64))
    angle_rng, direction_rng, point_rng = streams(rng, 3)
    angles = angle_rng.uniform(low, high, size=n_nodes)
    magnitudes = np.tan(angles) / activation.slope_at_inflection
    weights = magnitudes[:, None] * unit_directions(direction_rng, n_nodes, n)
    return HiddenLayer(weights, through_points(weights, box_points(point_rng, n_nodes, n), activation))

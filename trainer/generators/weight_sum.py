"""Weight-sum generator: each node's total weight is drawn first and then shared among the inputs
(see docs/training.md).

For node j: a sum S_j ~ U(r, s) (0 < r <= s), shares w_j uniform on the simplex (normalised
standard exponential draws, a Dirichlet(1, .., 1) vector), signs +-1 with equal chances, so
a_ji = sign_ji S_j w_ji and sum_i |a_ji| = S_j; and a point p_j uniform in the unit box with
b_j = z0 - a_j.p_j, so the inflection hyperplane passes through the box.
"""

from __future__ import annotations

import numpy as np

from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.generators.streams import box_points, streams, through_points

DEFAULT_SUMS = (2.0, 10.0)  # (r, s), activation argument per normalised input; best on Franke's


def generate(U, T, n_nodes, rng, activation, *, weight_sum=DEFAULT_SUMS, **_unused) -> HiddenLayer:
    """Layer of ``n_nodes`` nodes for inputs U of shape (N, n); ``T`` unused."""
    n = U.shape[1]
    low, high = (float(v) for v in weight_sum)
    sum_rng, share_rng, sign_rng, point_rng = streams(rng, 4)
    sums = sum_rng.uniform(low, high, size=n_nodes)
    shares = share_rng.standard_exponential((n_nodes, n))
    shares /= shares.sum(axis=1, keepdims=True)
    signs = np.where(sign_rng.randint(2, size=(n_nodes, n)) == 1, 1.0, -1.0)
    weights = signs * sums[:, None] * shares
    return HiddenLayer(weights, through_points(weights, box_points(point_rng, n_nodes, n), activation))

"""Data-driven hidden nodes: each node is anchored at a training point and takes the slope of an
affine function fitted by least squares to that point's k nearest neighbours.

For anchor x*, local slope c and activation g with inflection z0 and slope g'(z0) there, the node is
a = s * c / g'(z0) and b = z0 - a.x*, so g(a.x + b) has its inflection at x* and its gradient there is
s * c. Degenerate neighbourhoods never crash: local fits are minimum-norm (pseudo-inverse), and a node
whose fitted slope is ~0 (a flat local target) falls back to a random direction of typical length.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from nodecast.trainer.generators.base import HiddenLayer

_FLAT = 1e-10  # slope norms below this, in normalised target per normalised input, count as flat
_CHUNK = 512   # nodes per batched pseudo-inverse, to bound memory


def draw_anchors(n_rows: int, n_nodes: int, rng: np.random.RandomState) -> np.ndarray:
    """Row indices: without replacement while n_nodes <= n_rows, then further shuffled rounds."""
    rounds = [rng.permutation(n_rows) for _ in range(-(-n_nodes // n_rows))]
    return np.concatenate(rounds)[:n_nodes]


def local_slopes(U, local_targets, neighbours, anchors) -> np.ndarray:
    """Minimum-norm least-squares slopes c of t(x) = c0 + c.(x - x*) over each anchor's neighbours.

    U : ndarray of shape (N, n), normalised inputs.
    local_targets : ndarray of shape (n_nodes, k), each node's target column at its neighbours.
    neighbours : ndarray of shape (n_nodes, k), row indices; anchors : ndarray of shape (n_nodes,).
    Returns the slopes, ndarray of shape (n_nodes, n).
    """
    n_nodes, n = anchors.shape[0], U.shape[1]
    slopes = np.empty((n_nodes, n))
    for start in range(0, n_nodes, _CHUNK):
        stop = min(start + _CHUNK, n_nodes)
        local = U[neighbours[start:stop]] - U[anchors[start:stop], None, :]
        design = np.concatenate([np.ones(local.shape[:2] + (1,)), local], axis=2)
        coeffs = np.linalg.pinv(design, rcond=1e-10) @ local_targets[start:stop, :, None]
        slopes[start:stop] = coeffs[:, 1:, 0]
    return slopes


def generate(U, T, n_nodes, rng, activation, *, n_neighbors=None, slope_scale=1.0,
             **_unused) -> HiddenLayer:
    N, n = U.shape
    k = min(n_neighbors or default_neighbors(n), N)
    anchors = draw_anchors(N, n_nodes, rng)
    columns = rng.randint(T.shape[1], size=n_nodes)
    _, neighbours = cKDTree(U).query(U[anchors], k=k)
    neighbours = np.asarray(neighbours).reshape(n_nodes, k)
    slopes = local_slopes(U, T[neighbours, columns[:, None]], neighbours, anchors)
    norms = np.linalg.norm(slopes, axis=1)
    flat = norms < _FLAT
    if flat.any():
        typical = np.median(norms[~flat]) if (~flat).any() else 1.0
        directions = rng.standard_normal((int(flat.sum()), n))
        directions /= np.linalg.norm(directions, axis=1, keepdims=True)
        slopes[flat] = typical * directions
    weights = slope_scale * slopes / activation.slope_at_inflection
    biases = activation.inflection - np.einsum("ij,ij->i", weights, U[anchors])
    diagnostics = {
        "neighbors": int(k),
        "flat_neighbourhoods": int(flat.sum()),
        "underdetermined_fits": int(n_nodes if k < n + 1 else 0),
        "repeated_anchors": int(n_nodes - np.unique(anchors).size),
    }
    return HiddenLayer(weights, biases, diagnostics)


def default_neighbors(n_features: int) -> int:
    """Default k: twice the points a determined local fit needs, and at least 10."""
    return max(10, 2 * (n_features + 1))

"""Data-driven hidden nodes: each node is anchored at a training point and takes the slope of an
affine function fitted by least squares to that point's k nearest neighbours (SPEC "Method").

For anchor x*, local slope c and activation g with inflection z0 and slope g'(z0) there, the node is
a = s * c / g'(z0) and b = z0 - a.x*, so g(a.x + b) has its inflection at x* and its gradient there
is s * c. With several targets each node fits one target column drawn at random.

Degenerate cases never crash and are counted in the layer's diagnostics:

* constant features (zero span in the input box) are left out of the local fits: their slope is 0;
* a neighbourhood whose local design has rank below its column count (duplicate rows, k < n + 1,
  points on a lower-dimensional set) gets the minimum-norm fit (SVD, singular values below
  ``_RANK_TOLERANCE`` times the largest count as zero): ``rank_deficient_fits``;
* k < n + 1 makes every fit underdetermined: ``underdetermined_fits``;
* a flat local target (slope norm below ``_FLAT``) falls back to a random direction with the median
  length of the other slopes (1 if all are flat), still anchored at x*: ``flat_neighbourhoods``;
* more nodes than rows reuse anchors, in further shuffled rounds: ``repeated_anchors``.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from nodecast.trainer.generators.base import HiddenLayer

_FLAT = 1e-10  # slope norms below this, in normalised target per normalised input, count as flat
_RANK_TOLERANCE = 1e-10  # relative singular-value cutoff of the local minimum-norm fits
_CHUNK = 512  # nodes per batched SVD, to bound memory


def default_neighbors(n_features: int) -> int:
    """Default k: twice the points a determined local fit needs, and at least 10."""
    return max(10, 2 * (n_features + 1))


def draw_anchors(n_rows: int, n_nodes: int, rng: np.random.RandomState) -> np.ndarray:
    """Row indices: without replacement while n_nodes <= n_rows, then further shuffled rounds."""
    rounds = [rng.permutation(n_rows) for _ in range(-(-n_nodes // n_rows))]
    return np.concatenate(rounds)[:n_nodes]


def local_slopes(U, local_targets, neighbours, anchors) -> tuple[np.ndarray, np.ndarray]:
    """Minimum-norm least-squares slopes c of t(x) = c0 + c.(x - x*) over each anchor's neighbours.

    U : ndarray of shape (N, q), normalised inputs (the varying features only).
    local_targets : ndarray of shape (n_nodes, k), each node's target column at its neighbours.
    neighbours : ndarray of shape (n_nodes, k), row indices; anchors : ndarray of shape (n_nodes,).
    Returns the slopes, ndarray of shape (n_nodes, q), and the rank of each local design,
    ndarray of shape (n_nodes,).
    """
    n_nodes, q = anchors.shape[0], U.shape[1]
    slopes, ranks = np.empty((n_nodes, q)), np.empty(n_nodes, dtype=int)
    for start in range(0, n_nodes, _CHUNK):
        stop = min(start + _CHUNK, n_nodes)
        local = U[neighbours[start:stop]] - U[anchors[start:stop], None, :]
        design = np.concatenate([np.ones(local.shape[:2] + (1,)), local], axis=2)
        left, sv, right_t = np.linalg.svd(design, full_matrices=False)
        kept = sv > _RANK_TOLERANCE * sv[:, :1]
        inverse = np.divide(1.0, sv, out=np.zeros_like(sv), where=kept)
        rotated = np.einsum("nkr,nk->nr", left, local_targets[start:stop]) * inverse
        slopes[start:stop] = np.einsum("nrc,nr->nc", right_t, rotated)[:, 1:]
        ranks[start:stop] = kept.sum(axis=1)
    return slopes, ranks


def _replace_flat(slopes: np.ndarray, rng: np.random.RandomState) -> np.ndarray:
    """Give nodes with a ~0 slope a random direction of the other slopes' median length."""
    norms = np.linalg.norm(slopes, axis=1)
    flat = norms < _FLAT
    if flat.any():
        typical = np.median(norms[~flat]) if (~flat).any() else 1.0
        directions = rng.standard_normal((int(flat.sum()), slopes.shape[1]))
        directions /= np.linalg.norm(directions, axis=1, keepdims=True)
        slopes[flat] = typical * directions
    return flat


def generate(U, T, n_nodes, rng, activation, *, n_neighbors=None, slope_scale=1.0,
             **_unused) -> HiddenLayer:
    """Data-driven layer for normalised inputs U of shape (N, n) and targets T of shape (N, t)."""
    N, n = U.shape
    varying = np.flatnonzero(np.ptp(U, axis=0) > 0)
    q = varying.size
    k = min(n_neighbors or default_neighbors(q), N)
    anchors = draw_anchors(N, n_nodes, rng)
    columns = rng.randint(T.shape[1], size=n_nodes)
    slopes = np.zeros((n_nodes, n))
    flat = np.ones(n_nodes, dtype=bool)
    ranks = np.zeros(n_nodes, dtype=int)
    if q:
        V = np.ascontiguousarray(U[:, varying])
        tree = cKDTree(V, leafsize=16, compact_nodes=False, balanced_tree=False)
        _, neighbours = tree.query(V[anchors], k=k, workers=-1)
        neighbours = np.asarray(neighbours).reshape(n_nodes, k)
        fitted, ranks = local_slopes(V, T[neighbours, columns[:, None]], neighbours, anchors)
        flat = _replace_flat(fitted, rng)
        slopes[:, varying] = fitted
    weights = slope_scale * slopes / activation.slope_at_inflection
    biases = activation.inflection - np.einsum("ij,ij->i", weights, U[anchors])
    diagnostics = {
        "neighbors": int(k),
        "flat_neighbourhoods": int(flat.sum()),
        "rank_deficient_fits": int(np.sum(ranks < min(k, q + 1))),
        "underdetermined_fits": int(n_nodes if k < q + 1 else 0),
        "repeated_anchors": int(n_nodes - np.unique(anchors).size),
    }
    return HiddenLayer(weights, biases, diagnostics)

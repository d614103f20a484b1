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
* a flat local target (slope norm below ``_FLAT``) falls back to a random direction of length
  ``FALLBACK_SLOPE`` (a rise of the whole target range across the whole box), still anchored at
  x*: ``flat_neighbourhoods``;
* more nodes than rows reuse anchors, in further shuffled rounds: ``repeated_anchors``.

The draw of M nodes is the prefix of the draw of more nodes with the same seed (what model
selection relies on): anchors, target columns and fallback directions come from three streams of
their own, each drawn node by node, and no node depends on another.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

from nodecast.trainer.generators.base import HiddenLayer

_FLAT = 1e-10  # slope norms below this, in normalised target per normalised input, count as flat
_RANK_TOLERANCE = 1e-10  # relative singular-value cutoff of the local minimum-norm fits
_CHUNK = 512  # nodes per batched SVD, to bound memory
FALLBACK_SLOPE = 1.0  # length of a flat node's slope, normalised target per normalised input


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
    """Give nodes with a ~0 slope a random direction of length ``FALLBACK_SLOPE``; returns the
    mask of those nodes. One direction is drawn per node, flat or not, so that node j's draw does
    not depend on the others."""
    directions = rng.standard_normal(slopes.shape)
    flat = np.linalg.norm(slopes, axis=1) < _FLAT
    if flat.any():
        chosen = directions[flat]
        slopes[flat] = FALLBACK_SLOPE * chosen / np.linalg.norm(chosen, axis=1, keepdims=True)
    return flat


def generate(U, T, n_nodes, rng, activation, *, n_neighbors=None, slope_scale=1.0,
             **_unused) -> HiddenLayer:
    """Data-driven layer for normalised inputs U of shape (N, n) and targets T of shape (N, t)."""
    N, n = U.shape
    varying = np.flatnonzero(np.ptp(U, axis=0) > 0)
    q = varying.size
    k = min(n_neighbors or default_neighbors(q), N)
    anchor_rng, column_rng, direction_rng = (np.random.RandomState(seed)
                                             for seed in rng.randint(2**31 - 1, size=3))
    anchors = draw_anchors(N, n_nodes, anchor_rng)
    columns = column_rng.randint(T.shape[1], size=n_nodes)
    slopes = np.zeros((n_nodes, n))
    flat = np.ones(n_nodes, dtype=bool)
    ranks = np.zeros(n_nodes, dtype=int)
    if q:
        V = np.ascontiguousarray(U[:, varying])
        tree = cKDTree(V, leafsize=16, compact_nodes=False, balanced_tree=False)
        _, neighbours = tree.query(V[anchors], k=k, workers=-1)
        neighbours = np.asarray(neighbours).reshape(n_nodes, k)
        fitted, ranks = local_slopes(V, T[neighbours, columns[:, None]], neighbours, anchors)
        flat = _replace_flat(fitted, direction_rng)
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

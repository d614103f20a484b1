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

from dataclasses import dataclass

import numpy as np

from nodecast.trainer.anchors import draw_anchors
from nodecast.trainer.generators.base import HiddenLayer
from nodecast.trainer.neighbours import NearestRows

_FLAT = 1e-10  # slope norms below this, in normalised target per normalised input, count as flat
_RANK_TOLERANCE = 1e-10  # relative singular-value cutoff of the local minimum-norm fits
_CHUNK = 512  # nodes per batched SVD, to bound memory
FALLBACK_SLOPE = 1.0  # length of a flat node's slope, normalised target per normalised input


def default_neighbors(n_features: int) -> int:
    """Default k: twice the points a determined local fit needs, and at least 10."""
    return max(10, 2 * (n_features + 1))


def local_slopes(local: np.ndarray, local_targets: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Minimum-norm least-squares slopes c of t(x) = c0 + c.(x - x*) over each anchor's neighbours.

    local : ndarray of shape (n_nodes, k, q), each node's neighbours minus its anchor x* (the
    varying features only); local_targets : ndarray of shape (n_nodes, k), each node's target
    column at its neighbours.
    Returns the slopes, ndarray of shape (n_nodes, q), and the rank of each local design,
    ndarray of shape (n_nodes,).
    """
    n_nodes, q = local.shape[0], local.shape[2]
    slopes, ranks = np.empty((n_nodes, q)), np.empty(n_nodes, dtype=int)
    for start in range(0, n_nodes, _CHUNK):
        stop = min(start + _CHUNK, n_nodes)
        design = np.concatenate([np.ones(local[start:stop].shape[:2] + (1,)), local[start:stop]], axis=2)
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


@dataclass(frozen=True, eq=False)
class NodePlan:
    """What a data-driven draw decides before it looks at the rows: each node's anchor (a global
    row index) and target column, the neighbours k, and the stream of the flat-node directions."""

    anchors: np.ndarray
    columns: np.ndarray
    k: int
    directions: np.random.RandomState


def plan_nodes(n_rows, n_targets, n_nodes, rng, n_varying, n_neighbors=None) -> NodePlan:
    """The draws of :func:`generate`, from the numbers of rows, targets and varying features."""
    k = min(n_neighbors or default_neighbors(n_varying), n_rows)
    anchor_rng, column_rng, direction_rng = (np.random.RandomState(seed)
                                             for seed in rng.randint(2**31 - 1, size=3))
    anchors = draw_anchors(n_rows, n_nodes, anchor_rng)
    return NodePlan(anchors, column_rng.randint(n_targets, size=n_nodes), k, direction_rng)


def generate(U, T, n_nodes, rng, activation, *, n_neighbors=None, slope_scale=1.0,
             **_unused) -> HiddenLayer:
    """Data-driven layer for normalised inputs U of shape (N, n) and targets T of shape (N, t)."""
    varying = np.flatnonzero(np.ptp(U, axis=0) > 0)
    plan = plan_nodes(U.shape[0], T.shape[1], n_nodes, rng, varying.size, n_neighbors)
    anchor_rows = U[plan.anchors]
    nearest = NearestRows(anchor_rows[:, varying], plan.k, plan.columns)
    if varying.size:
        nearest.update(np.ascontiguousarray(U[:, varying]), T, 0)
    return layer_from_neighbourhoods(plan, anchor_rows, varying, nearest, activation, slope_scale)


def layer_from_neighbourhoods(plan: NodePlan, anchor_rows, varying, nearest: NearestRows,
                              activation, slope_scale) -> HiddenLayer:
    """The layer from the anchors' rows (n_nodes, n) and their k nearest rows (over the varying
    features, wherever they were searched: in memory, chunk by chunk, or on a cluster)."""
    n_nodes, n = anchor_rows.shape
    q, k = varying.size, plan.k
    slopes = np.zeros((n_nodes, n))
    flat = np.ones(n_nodes, dtype=bool)
    ranks = np.zeros(n_nodes, dtype=int)
    if q:
        local = nearest.rows - anchor_rows[:, None, varying]
        fitted, ranks = local_slopes(local, nearest.targets)
        flat = _replace_flat(fitted, plan.directions)
        slopes[:, varying] = fitted
    weights = slope_scale * slopes / activation.slope_at_inflection
    biases = activation.inflection - np.einsum("ij,ij->i", weights, anchor_rows)
    diagnostics = {
        "neighbors": int(k),
        "flat_neighbourhoods": int(flat.sum()),
        "rank_deficient_fits": int(np.sum(ranks < min(k, q + 1))),
        "underdetermined_fits": int(n_nodes if k < q + 1 else 0),
        "repeated_anchors": int(n_nodes - np.unique(plan.anchors).size),
    }
    return HiddenLayer(weights, biases, diagnostics)

"""Data-driven hidden nodes: each node is anchored at a training point and takes the slope of an
affine function fitted by least squares to that point's k nearest neighbours (SPEC "Method").

For anchor x*, local slope c and activation g with inflection z0 and slope g'(z0) there, the node is
a = s * c / g'(z0) and b = z0 - a.x*, so g(a.x + b) has its inflection at x* and its gradient there
is s * c. With several targets each node fits one target column drawn at random.

The local fit is a ridge fit scaled to the neighbourhood and shrunk towards the global linear
trend, so that it is well posed whatever the columns look like (discrete counts, one-hot or yes/no
columns, duplicated rows, a column whose values crowd into a corner of its range). With the
neighbours' inputs and targets centred (the intercept is not penalised), s_1 the largest singular
value of the centred local design L, and g the ridge slope of the same target column over all
rows (``global_slopes``, with the same relative ridge):

    c = argmin ||t - L c||^2 + mu ||c - g||^2,   mu = ``LOCAL_RIDGE`` * s_1^2.

Along directions the neighbourhood spans well, c is the least-squares slope of the published
method (a local condition number of 10 changes it by under 1%); along a direction it spreads less
than 1% of its widest spread the fit is damped towards g; along a direction it does not span at all
(a one-hot column constant among the neighbours, k < n + 1) c takes g's component instead of 0, so
the nodes still vary with such columns (measured on tests/benchmarks/real_data_accuracy.py's
counts_one_hot data with ridge 1e-3: with 0 there a one-hot family effect was lost, test RMSE 1.07
against noise 0.5; with the trend 0.51). The slope's length is then at most
``SLOPE_LIMIT`` (target ranges per input range, normalised units): a longer slope is shortened to
that length, direction kept. So no node is steeper than ``slope_scale * SLOPE_LIMIT / g'(z0)`` in
normalised coordinates (the norm of its weight vector), whatever the data.

Degenerate cases never crash and are counted in the layer's diagnostics:

* constant features (zero span in the input box) are left out of the local fits: their slope is 0;
* a local design whose rank (singular values above ``_RANK_TOLERANCE`` times the largest) is below
  min(k - 1, q): ``rank_deficient_fits`` (the missing directions take the global trend);
* a local design with a direction damped by half or more (a singular value above the rank cutoff
  but below sqrt(``LOCAL_RIDGE``) times the largest): ``damped_fits``;
* a slope longer than ``SLOPE_LIMIT``, shortened: ``capped_slopes``;
* k < n + 1 makes every fit underdetermined (the global trend outside the neighbourhood's span):
  ``underdetermined_fits``;
* a flat local target (slope norm below ``_FLAT``) falls back to a random direction of length
  ``FALLBACK_SLOPE`` (a rise of the whole target range across the whole box), still anchored at
  x*: ``flat_neighbourhoods``;
* more nodes than rows reuse anchors, in further shuffled rounds: ``repeated_anchors``.

The default k is max(10, 2(n + 1)), at most ``WIDE_NEIGHBORS``: the local fits cost about
M k n min(k, n), cubic in n without the cap; with it, linear in n (docs/training.md).

All local fits run on one BLAS thread, under the solver's guard
(:func:`nodecast.trainer.solvers.single_blas_thread`): many small SVDs on a threaded BLAS ran fifty
times slower on a busy two-core machine.

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
from nodecast.trainer.solvers import single_blas_thread

_FLAT = 1e-3  # slope norms below this (a rise under 0.1% of the target range across the box) are flat
_RANK_TOLERANCE = 1e-10  # relative singular value below which a local direction counts as missing
_CHUNK_ENTRIES = 2**22  # neighbour coordinates per batch of local fits (32 MiB of float64)
LOCAL_RIDGE = 1e-4  # mu / s_1^2 of the local ridge fits
SLOPE_LIMIT = 64.0  # longest local slope, normalised target per normalised input
WIDE_NEIGHBORS = 128  # largest default k
GLOBAL_ROWS = 20_000  # rows (evenly strided) of the global trend that fills unseen directions
FALLBACK_SLOPE = 1.0  # length of a flat node's slope, normalised target per normalised input


def default_neighbors(n_features: int) -> int:
    """Default k: twice the points a determined local fit needs, at least 10 and at most
    ``WIDE_NEIGHBORS`` (which bounds the cost of the local fits on wide data)."""
    return min(max(10, 2 * (n_features + 1)), WIDE_NEIGHBORS)


def global_stride(n_rows: int) -> int:
    """Every how many rows the global trend takes one (rows 0, stride, 2 stride, ...)."""
    return -(-n_rows // GLOBAL_ROWS)


def global_slopes(U: np.ndarray, T: np.ndarray, strided: bool = False) -> np.ndarray:
    """The linear trend of each target column over all rows (at most ``GLOBAL_ROWS``, evenly
    strided): ridge slopes with mu = ``LOCAL_RIDGE`` s_1^2, as the local fits; shape (t, q).
    ``strided``: U and T are already the rows 0, s, 2s, ... of :func:`global_stride` (gathered
    chunk by chunk or from partitions)."""
    stride = 1 if strided else global_stride(U.shape[0])
    inputs, targets = U[::stride] - U[::stride].mean(axis=0), T[::stride] - T[::stride].mean(axis=0)
    with single_blas_thread():
        left, sv, right_t = np.linalg.svd(inputs, full_matrices=False)
    gain = np.divide(sv, sv**2 + LOCAL_RIDGE * sv[0] ** 2, out=np.zeros_like(sv),
                     where=sv > _RANK_TOLERANCE * sv[0])
    return (right_t.T @ (gain[:, None] * (left.T @ targets))).T


def local_slopes(rows, local_targets, prior=None) -> tuple[np.ndarray, dict]:
    """Ridge slopes c of t(x) = c0 + c.x over each node's neighbours, shrunk towards ``prior``
    (the module docstring), capped.

    rows : ndarray of shape (n_nodes, k, q), each node's neighbours, nearest first (normalised
    inputs, the varying features only).
    local_targets : ndarray of shape (n_nodes, k), each node's target column at its neighbours.
    prior : ndarray of shape (n_nodes, q), each node's global slope (None: zero).
    Returns the slopes, ndarray of shape (n_nodes, q), and the counts ``rank_deficient_fits``,
    ``damped_fits`` and ``capped_slopes``.
    """
    n_nodes, k, q = rows.shape
    prior = np.zeros((n_nodes, q)) if prior is None else prior
    slopes = np.empty((n_nodes, q))
    deficient = damped = 0
    chunk = max(1, _CHUNK_ENTRIES // (k * q))
    for start in range(0, n_nodes, chunk):
        stop = min(start + chunk, n_nodes)
        local = rows[start:stop].copy()
        local -= local.mean(axis=1, keepdims=True)
        targets = local_targets[start:stop] - local_targets[start:stop].mean(axis=1, keepdims=True)
        targets -= np.einsum("nkc,nc->nk", local, prior[start:stop])  # what the prior leaves
        with single_blas_thread():
            left, sv, right_t = np.linalg.svd(local, full_matrices=False)
        largest = sv[:, :1]
        present = sv > _RANK_TOLERANCE * largest
        gain = np.divide(sv, sv**2 + LOCAL_RIDGE * largest**2, out=np.zeros_like(sv),
                         where=present)
        rotated = np.einsum("nkr,nk->nr", left, targets) * gain
        slopes[start:stop] = prior[start:stop] + np.einsum("nrc,nr->nc", right_t, rotated)
        deficient += int(np.sum(present.sum(axis=1) < min(k - 1, q)))
        weak = present & (sv < np.sqrt(LOCAL_RIDGE) * largest)
        damped += int(np.sum(weak.any(axis=1)))
    lengths = np.linalg.norm(slopes, axis=1)
    steep = lengths > SLOPE_LIMIT
    slopes[steep] *= (SLOPE_LIMIT / lengths[steep])[:, None]
    return slopes, {"rank_deficient_fits": deficient, "damped_fits": damped,
                    "capped_slopes": int(steep.sum())}


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
    row index, :mod:`nodecast.trainer.anchors`) and target column, and the seed of the stream of
    flat-node directions."""

    anchors: np.ndarray
    columns: np.ndarray
    direction_seed: int


def plan_nodes(n_rows: int, n_targets: int, n_nodes: int, rng) -> NodePlan:
    """The draws of :func:`generate` from the numbers of rows and targets (the rows are not needed:
    what makes streamed and cluster fits draw the in-memory layer)."""
    anchor_seed, column_seed, direction_seed = rng.randint(2**31 - 1, size=3)
    anchors = draw_anchors(n_rows, n_nodes, np.random.RandomState(anchor_seed))
    columns = np.random.RandomState(column_seed).randint(n_targets, size=n_nodes)
    return NodePlan(anchors, columns, int(direction_seed))


def generate(U, T, n_nodes, rng, activation, *, n_neighbors=None, slope_scale=1.0,
             **_unused) -> HiddenLayer:
    """Data-driven layer for normalised inputs U of shape (N, n) and targets T of shape (N, t)."""
    N = U.shape[0]
    varying = np.flatnonzero(np.ptp(U, axis=0) > 0)
    k = min(n_neighbors or default_neighbors(varying.size), N)
    plan = plan_nodes(N, T.shape[1], n_nodes, rng)
    anchor_rows = U[plan.anchors]
    nearest, prior = None, None
    if varying.size:
        V = np.ascontiguousarray(U[:, varying])
        nearest = NearestRows(anchor_rows[:, varying], k, plan.columns)
        nearest.update(V, T, 0)
        prior = global_slopes(V, T)[plan.columns]
    return layer_from_neighbourhoods(plan, anchor_rows, varying, k, nearest, prior, activation,
                                     slope_scale)


def layer_from_neighbourhoods(plan: NodePlan, anchor_rows, varying, k: int, nearest, prior,
                              activation, slope_scale) -> HiddenLayer:
    """The layer from the anchors' rows (n_nodes, n), their nearest rows (a :class:`NearestRows`
    over the varying features holding k or more, wherever they were searched: in memory, chunk by
    chunk or on a cluster; the first k are used) and each node's global slope ``prior``."""
    n_nodes, n = anchor_rows.shape
    q = varying.size
    slopes = np.zeros((n_nodes, n))
    flat = np.ones(n_nodes, dtype=bool)
    counts = {"rank_deficient_fits": 0, "damped_fits": 0, "capped_slopes": 0}
    if q:
        fitted, counts = local_slopes(nearest.rows[:, :k], nearest.targets[:, :k], prior)
        flat = _replace_flat(fitted, np.random.RandomState(plan.direction_seed))
        slopes[:, varying] = fitted
    weights = slope_scale * slopes / activation.slope_at_inflection
    biases = activation.inflection - np.einsum("ij,ij->i", weights, anchor_rows)
    diagnostics = {
        "neighbors": int(k),
        "flat_neighbourhoods": int(flat.sum()),
        **counts,
        "underdetermined_fits": int(n_nodes if k < q + 1 else 0),
        "repeated_anchors": int(n_nodes - np.unique(plan.anchors).size),
    }
    return HiddenLayer(weights, biases, diagnostics)

"""Certified shrinking: remove hidden nodes within an error budget that holds over the whole domain.

Three passes, each ``Network -> Network`` for one node, each with a bound on how far any output
moves, for every input of the declared box (target units, per output):

``fold``   a node that is nearly constant over the box becomes the constant midway between its
           extreme values, added to the output bias. Bound: |beta_j| (g(hi_j) - g(lo_j)) / 2.
``drop``   a node whose whole contribution is small is removed. Bound: |beta_j| max |g| over
           [lo_j, hi_j]. It never beats ``fold`` (whose constant may be 0), so the planner takes it
           only on a tie, where it leaves the bias alone.
``merge``  a node j whose pre-activation is (nearly) that of node i, or its negative, is removed
           and its output weight added to node i's: g(-z) = (g_low + g_high) - g(z) for both
           activations, so a negative match also moves (g_low + g_high) beta_j into the bias.
           Bound: |beta_j| L D with D = max over the box of |z_j - s z_i| (affine, so exact) and
           L the largest slope of g between the two pre-activations (the mean value theorem).

[lo_j, hi_j] is node j's exact pre-activation range over the box
(:func:`nodecast.compiler.bounds.ranges.preactivation_ranges`; z is affine in x). The planner
(:func:`shrink`) repeatedly applies the cheapest removal whose bound still fits the remaining budget;
the bounds add up (triangle inequality), so the total is a bound on |shrunk(x) - original(x)| for
every x in the box (and every input a clamping artifact clips into it). It covers the networks in
exact arithmetic; an artifact's rounding is bounded separately, against the network it computes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.bounds.ranges import affine_ranges, normalised_box, preactivation_ranges
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network

ACTIONS = ("merge", "fold", "drop")
G_ROUNDING = 8 * 2.0**-53


@dataclass(frozen=True)
class Removal:
    """One removed node: ``node`` and ``into`` are indices in the original network."""

    action: str
    node: int
    error: tuple[float, ...]  # bound per output, target units
    into: int | None = None
    sign: int = 1

    def as_dict(self) -> dict:
        record = {"action": self.action, "node": self.node, "error_bound": list(self.error)}
        if self.into is not None:
            record.update(into=self.into, sign=self.sign)
        return record


def _g(net: Network, z) -> np.ndarray:
    return get_activation(net.activation).function(np.asarray(z, dtype=np.float64))


def _peak_slope(net: Network, lo, hi) -> np.ndarray:
    """The largest slope of g over [lo, hi]: at the point nearest the inflection."""
    act = get_activation(net.activation)
    return act.derivative(np.clip(act.inflection, lo, hi))


def _half_width(g_lo, g_hi):
    """Half of g's range, widened by a few units of float64 roundoff of the evaluated g (NumPy's
    tanh is within a few ulp), so a computed 0 for a saturated node is never an understatement."""
    return 0.5 * (g_hi - g_lo) + G_ROUNDING * np.maximum(np.abs(g_lo), np.abs(g_hi))


def match_factors(net: Network, lo, hi) -> tuple[np.ndarray, np.ndarray]:
    """For every pair (j, i): the smallest L D over the signs s = +1, -1 (M, M), and that sign.

    D is the exact maximum of |z_j - s z_i| over the box (widened for float64 rounding by
    :func:`affine_ranges`), L the largest slope of g between the two pre-activations. The diagonal
    is infinite (a node does not merge with itself).
    """
    u_low, u_high = normalised_box(net, net.domain_low, net.domain_high)
    A, b = net.hidden_weights, net.hidden_biases
    best = np.full((net.n_nodes, net.n_nodes), np.inf)
    signs = np.ones((net.n_nodes, net.n_nodes), dtype=np.int8)
    for i in range(net.n_nodes):
        for s in (1, -1):
            d_lo, d_hi = affine_ranges(A - s * A[i], b - s * b[i], u_low, u_high)
            distance = np.maximum(np.abs(d_lo[0]), np.abs(d_hi[0]))
            other_lo, other_hi = (lo[i], hi[i]) if s == 1 else (-hi[i], -lo[i])
            slope = _peak_slope(net, np.minimum(lo, other_lo), np.maximum(hi, other_hi))
            factor = slope * distance
            factor[i] = np.inf
            better = factor < best[:, i]
            best[better, i], signs[better, i] = factor[better], s
    return best, signs


def duplicate_pairs(net: Network, tolerance: float) -> list[tuple[int, int, int, float]]:
    """Pairs (j, i, s, D), j > i, whose pre-activations differ by at most ``tolerance`` over the
    box: D = max |z_j - s z_i| (s = -1: one is the other's negative)."""
    u_low, u_high = normalised_box(net, net.domain_low, net.domain_high)
    A, b = net.hidden_weights, net.hidden_biases
    pairs = []
    for i in range(net.n_nodes - 1):
        for s in (1, -1):
            d_lo, d_hi = affine_ranges(A[i + 1:] - s * A[i], b[i + 1:] - s * b[i], u_low, u_high)
            distance = np.maximum(np.abs(d_lo[0]), np.abs(d_hi[0]))
            pairs += [(int(i + 1 + k), i, s, float(distance[k]))
                      for k in np.flatnonzero(distance <= tolerance)]
    return sorted(pairs)


def fold_node(net: Network, j: int, constant: float) -> Network:
    """Node j replaced by ``constant`` in the output bias."""
    bias = net.output_bias + constant * net.output_weights[j]
    return _without(net, j).replace(output_bias=bias)


def drop_node(net: Network, j: int) -> Network:
    return _without(net, j)


def merge_node(net: Network, j: int, i: int, sign: int) -> Network:
    """Node j removed, its output weight moved onto node i (sign -1: onto the negated node)."""
    act = get_activation(net.activation)
    weights = net.output_weights.copy()
    weights[i] += sign * weights[j]
    bias = net.output_bias + (0.0 if sign == 1 else (act.low + act.high) * weights[j])
    return _without(net.replace(output_weights=weights), j).replace(output_bias=bias)


def _without(net: Network, j: int) -> Network:
    keep = np.arange(net.n_nodes) != j
    return net.replace(hidden_weights=net.hidden_weights[keep], hidden_biases=net.hidden_biases[keep],
                       output_weights=net.output_weights[keep],
                       level_weights=net.level_weights[:, keep])


@dataclass(frozen=True)
class ShrinkResult:
    network: Network
    removals: tuple[Removal, ...]
    kept: tuple[int, ...]  # original indices of the remaining nodes, in order
    error_bound: tuple[float, ...]  # per output, target units: the sum of the removals' bounds

    def counts(self) -> dict[str, int]:
        return {action: sum(r.action == action for r in self.removals) for action in ACTIONS}


def shrink(net: Network, max_error: float, actions=ACTIONS) -> ShrinkResult:
    """Remove nodes, cheapest bound first, while the summed bounds stay within ``max_error``
    (target units, each output). Deterministic: on a tie the later node goes (so a duplicate
    merges into the earlier node it duplicates)."""
    if not (np.isfinite(max_error) and max_error >= 0):
        raise NodecastError(f"the error budget must be a finite number >= 0, got {max_error!r}")
    if net.n_categorical:
        raise NodecastError("shrinking does not cover categorical inputs yet (their level vectors "
                            "move every node's pre-activation range); shrink a model without them")
    unknown = set(actions) - set(ACTIONS)
    if unknown:
        raise NodecastError(f"shrink actions are {', '.join(ACTIONS)}, not {sorted(unknown)[0]!r}")
    lo, hi = preactivation_ranges(net)
    factors, signs = match_factors(net, lo, hi) if "merge" in actions else (None, None)
    alive = np.ones(net.n_nodes, dtype=bool)
    beta = net.output_weights.copy()
    spent = np.zeros(net.n_outputs)
    removals, work = [], net
    while alive.sum() > 1:
        step = _cheapest(net, beta, lo, hi, alive, factors, signs, actions)
        if step is None or np.any(spent + step.error > max_error):
            break
        spent += step.error
        removals.append(step)
        beta, work = _apply(work, net, alive, beta, step, lo, hi)
        alive[step.node] = False
    kept = tuple(int(j) for j in np.flatnonzero(alive))
    return ShrinkResult(work, tuple(removals), kept, tuple(float(v) for v in spent))


def _cheapest(net, beta, lo, hi, alive, factors, signs, actions) -> Removal | None:
    """The removal with the smallest bound (largest output's share), among live nodes."""
    scaled = np.abs(beta) * net.output_scale * (1 + 1e-12)  # (M, t)
    g_lo, g_hi = _g(net, lo), _g(net, hi)
    options = []
    if "drop" in actions:
        peak = (1 + G_ROUNDING) * np.maximum(np.abs(g_lo), np.abs(g_hi))
        options.append(("drop", peak[:, None] * scaled, None))
    if "fold" in actions:
        options.append(("fold", _half_width(g_lo, g_hi)[:, None] * scaled, None))
    if factors is not None:
        live = np.where(alive[None, :], factors, np.inf)
        partner = np.argmin(live, axis=1)
        options.append(("merge", live[np.arange(len(partner)), partner][:, None] * scaled, partner))
    best = None
    for action, cost, partner in options:
        worst = np.where(alive, cost.max(axis=1), np.inf)
        j = len(worst) - 1 - int(np.argmin(worst[::-1]))  # ties: the later node goes
        if np.isfinite(worst[j]) and (best is None or worst[j] < best[0]):
            into = None if partner is None else int(partner[j])
            sign = 1 if into is None else int(signs[j, into])
            best = (worst[j], Removal(action, j, tuple(float(v) for v in cost[j]), into, sign))
    return None if best is None else best[1]


def _apply(work: Network, net: Network, alive, beta, step: Removal, lo, hi):
    """The step on the working network (indices shifted to its live nodes) and on ``beta``."""
    position = int(np.sum(alive[: step.node]))
    if step.action == "fold":
        constant = 0.5 * float(_g(net, lo[step.node]) + _g(net, hi[step.node]))
        work = fold_node(work, position, constant)
    elif step.action == "drop":
        work = drop_node(work, position)
    else:
        work = merge_node(work, position, int(np.sum(alive[: step.into])), step.sign)
        beta = beta.copy()
        beta[step.into] += step.sign * beta[step.node]
    return beta, work


def shrink_bundle(bundle, max_error: float, actions=ACTIONS):
    """The bundle with its network shrunk within ``max_error`` and a ``shrink`` record in its
    metadata (what was removed, each bound, the total); returns (bundle, ShrinkResult).

    The source's metrics describe the source model, so they move into the record; the training
    pre-activation ranges keep the remaining nodes'.
    """
    from nodecast.compiler.bundle import Bundle

    result = shrink(bundle.network, max_error, actions)
    metadata = {k: v for k, v in bundle.metadata.items() if k != "metrics"}
    metadata["shrink"] = {
        "source_bundle_id": bundle.bundle_id, "max_error": float(max_error),
        "error_bound": list(result.error_bound), "nodes_before": bundle.network.n_nodes,
        "nodes_after": result.network.n_nodes, "counts": result.counts(),
        "covers": "every input of the declared domain (and inputs a clamping artifact clips "
                  "into it), against the source network in exact arithmetic",
        "removals": [r.as_dict() for r in result.removals], "kept": list(result.kept),
        "source_metrics": bundle.metadata.get("metrics", {}),
    }
    ranges = bundle.metadata.get("node_ranges")
    if isinstance(ranges, dict) and all(isinstance(ranges.get(k), list) and
                                        len(ranges[k]) == bundle.network.n_nodes
                                        for k in ("training_z_low", "training_z_high")):
        metadata["node_ranges"] = {**ranges, **{k: [ranges[k][j] for j in result.kept]
                                                for k in ("training_z_low", "training_z_high")}}
    else:
        metadata.pop("node_ranges", None)
    return Bundle(network=result.network, metadata=metadata), result

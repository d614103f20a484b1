"""What ``nodecast inspect`` shows: sizes, domain, metrics, node diagnostics and error estimates."""

from __future__ import annotations

import json

import numpy as np

from nodecast.compiler import numerics
from nodecast.compiler.activations import get_activation
from nodecast.compiler.reference import hidden_layer

SATURATION = 0.01  # a node is saturated where its slope is below 1% of the slope at its inflection


def saturated_nodes(activation: str, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Boolean mask of the nodes whose slope stays below ``SATURATION`` times the slope at the
    inflection over the whole pre-activation range [low, high] (ndarrays of shape (n_nodes,))."""
    act = get_activation(activation)
    # the largest slope over [low, high] is at the point of the interval nearest the inflection
    peak_slope = act.derivative(np.clip(act.inflection, low, high))
    return peak_slope < SATURATION * act.slope_at_inflection


def node_ranges(bundle) -> dict:
    """Per node, the pre-activation range over the declared box (exact: z is affine in x) and how
    many nodes stay saturated (nearly constant) across the whole box."""
    net = bundle.network
    weights = net.hidden_weights / net.input_scale
    centre = hidden_layer(net, (0.5 * (net.domain_low + net.domain_high))[None, :])[0]
    radius = np.abs(weights) @ (0.5 * (net.domain_high - net.domain_low))
    low, high = centre - radius, centre + radius
    saturated = saturated_nodes(net.activation, low, high)
    return {"z_low": low.tolist(), "z_high": high.tolist(), "saturated": int(saturated.sum()),
            "saturated_threshold": SATURATION}


def training_node_ranges(bundle) -> dict | None:
    """Per node, the pre-activation range over the training rows (recorded by the trainer in the
    metadata's ``node_ranges``) and how many nodes are saturated there; None if not recorded."""
    record = bundle.metadata.get("node_ranges")
    n = bundle.network.n_nodes
    if not isinstance(record, dict):
        return None
    try:
        low = np.array(record["training_z_low"], dtype=np.float64)
        high = np.array(record["training_z_high"], dtype=np.float64)
    except (KeyError, TypeError, ValueError):
        return None
    if low.shape != (n,) or high.shape != (n,) or not np.all(low <= high):
        return None
    saturated = saturated_nodes(bundle.network.activation, low, high)
    return {"z_low": low.tolist(), "z_high": high.tolist(), "saturated": int(saturated.sum()),
            "saturated_threshold": SATURATION}


def describe_bundle(bundle, precision: str | None = None) -> dict:
    net = bundle.network
    ranges, training = node_ranges(bundle), training_node_ranges(bundle)
    description = {
        "bundle_id": bundle.bundle_id, "task": net.task, "activation": net.activation,
        "features": [{"name": name, "unit": unit, "domain": [float(lo), float(hi)]}
                     for name, unit, lo, hi in zip(net.feature_names, net.feature_units,
                                                   net.domain_low, net.domain_high, strict=True)],
        "targets": [{"name": name, "unit": unit}
                    for name, unit in zip(net.target_names, net.target_units, strict=True)],
        "class_labels": list(net.class_labels), "nodes": net.n_nodes,
        "parameters": int(net.hidden_weights.size + net.hidden_biases.size + net.output_weights.size
                          + net.output_bias.size),
        "max_abs_output_weight": float(np.max(np.abs(net.output_weights * net.output_scale))),
        "saturated_nodes_on_domain": ranges["saturated"],
        "saturated_nodes_on_training_data": None if training is None else training["saturated"],
        "node_z_range_on_domain": _span(ranges),
        "node_z_range_on_training_data": None if training is None else _span(training),
        "metadata": bundle.metadata,
    }
    if precision:
        description["estimate"] = numerics.estimate(net, precision).as_dict()
        description.update(_certified(bundle, precision))
    return description


def _certified(bundle, precision: str) -> dict:
    """The certified bound of every target's default artifact at ``precision`` (the C one under
    ``certified_bound``) and the accuracy budget it is judged against."""
    from nodecast.compiler.bounds import certify
    from nodecast.compiler.bounds.budget import accuracy_budget
    from nodecast.compiler.bounds.certificate import TARGET_PRECISIONS

    net = bundle.network
    by_target = {target: certify(net, target, precision).as_dict()
                 for target, precisions in TARGET_PRECISIONS.items()
                 if precision in precisions and target != "reference"}
    budget = accuracy_budget(bundle)
    return {"certified_bound": by_target["c"]["certified_bound"],
            "certified_bound_by_target": by_target, "accuracy_budget": budget.as_dict()}


def _span(ranges: dict) -> dict:
    """A compact summary of per-node ranges: the smallest low, the largest high, and the median
    width (the per-node lists are in the metadata)."""
    low, high = np.array(ranges["z_low"]), np.array(ranges["z_high"])
    return {"min_low": float(low.min()), "max_high": float(high.max()),
            "median_width": float(np.median(high - low))}


def format_description(d: dict) -> str:
    lines = [f"bundle {d['bundle_id']}", f"{d['task']}, {d['nodes']} {d['activation']} nodes, "
             f"{d['parameters']} parameters, max |output weight| {d['max_abs_output_weight']:.3g}"]
    lines.append("features (in input order):")
    for f in d["features"]:
        lines.append(f"  {json.dumps(f['name'])} [{f['unit']}] domain {f['domain'][0]!r} .. "
                     f"{f['domain'][1]!r}")
    lines.append("outputs: " + ", ".join(json.dumps(t["name"]) for t in d["targets"]))
    metrics = d["metadata"].get("metrics", {})
    for split, values in sorted(metrics.items()):
        lines.append(f"{split}: " + ", ".join(f"{k} {v}" for k, v in sorted(values.items())))
    lines.append(f"nodes saturated over the whole domain: {d['saturated_nodes_on_domain']} of {d['nodes']}"
                 + _span_text(d["node_z_range_on_domain"]))
    training = d["saturated_nodes_on_training_data"]
    lines.append("nodes saturated over the training data: " + (
        "not recorded" if training is None else
        f"{training} of {d['nodes']}" + _span_text(d["node_z_range_on_training_data"])))
    diagnostics = d["metadata"].get("diagnostics", {})
    if diagnostics:
        lines.append("fit diagnostics: " + ", ".join(f"{k} {v}" for k, v in sorted(diagnostics.items())))
    if "estimate" in d:
        e, budget = d["estimate"], d["accuracy_budget"]
        for target, record in d["certified_bound_by_target"].items():
            bounds = ", ".join(f"{v:.3g}" for v in record["certified_bound"])
            lines.append(f"certified {e['precision']} error of the {target} artifact: {bounds} "
                         f"(assumes {record['assumes']})")
        limits = ", ".join("none" if v is None else f"{v:.3g}" for v in budget["per_output"])
        lines.append(f"accuracy budget: {limits} "
                     f"({budget['rule']})")
        lines.append(f"typical {e['precision']} error (an estimate, not a bound): "
                     f"{e['max_abs_error']:.3g}")
    return "\n".join(lines)


def _span_text(span: dict) -> str:
    return (f" (pre-activations from {span['min_low']:.3g} to {span['max_high']:.3g}, median node "
            f"width {span['median_width']:.3g})")

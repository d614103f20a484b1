"""What ``nodecast inspect`` shows: sizes, domain, metrics, node diagnostics and error estimates."""

from __future__ import annotations

import json

import numpy as np

from nodecast.compiler import numerics
from nodecast.compiler.activations import get_activation
from nodecast.compiler.reference import hidden_layer

SATURATION = 0.01  # a node is saturated where its slope is below 1% of the slope at its inflection


def node_ranges(bundle) -> dict:
    """Per node, the pre-activation range over the declared box (exact: z is affine in x) and how
    many nodes stay saturated (nearly constant) across the whole box."""
    net = bundle.network
    act = get_activation(net.activation)
    weights = net.hidden_weights / net.input_scale
    centre = hidden_layer(net, (0.5 * (net.domain_low + net.domain_high))[None, :])[0]
    radius = np.abs(weights) @ (0.5 * (net.domain_high - net.domain_low))
    low, high = centre - radius, centre + radius
    # the largest slope over [low, high] is at the point of the interval nearest the inflection
    nearest = np.clip(act.inflection, low, high)
    peak_slope = act.derivative(nearest)
    saturated = peak_slope < SATURATION * act.slope_at_inflection
    return {"z_low": low.tolist(), "z_high": high.tolist(), "saturated": int(saturated.sum()),
            "saturated_threshold": SATURATION}


def describe_bundle(bundle, precision: str | None = None) -> dict:
    net = bundle.network
    ranges = node_ranges(bundle)
    description = {
        "bundle_id": bundle.bundle_id, "task": net.task, "activation": net.activation,
        "features": [{"name": name, "unit": unit, "domain": [float(lo), float(hi)]}
                     for name, unit, lo, hi in zip(net.feature_names, net.feature_units,
                                                   net.domain_low, net.domain_high)],
        "targets": [{"name": name, "unit": unit} for name, unit in zip(net.target_names, net.target_units)],
        "class_labels": list(net.class_labels), "nodes": net.n_nodes,
        "parameters": int(net.hidden_weights.size + net.hidden_biases.size + net.output_weights.size
                          + net.output_bias.size),
        "max_abs_output_weight": float(np.max(np.abs(net.output_weights * net.output_scale))),
        "saturated_nodes_on_domain": ranges["saturated"],
        "metadata": bundle.metadata,
    }
    if precision:
        description["estimate"] = numerics.estimate(net, precision).as_dict()
    return description


def format_description(d: dict) -> str:
    lines = [f"bundle {d['bundle_id']}", f"{d['task']}, {d['nodes']} {d['activation']} nodes, "
             f"{d['parameters']} parameters, max |output weight| {d['max_abs_output_weight']:.3g}"]
    lines.append("features (in input order):")
    for f in d["features"]:
        lines.append(f"  {json.dumps(f['name'])} [{f['unit']}] domain {f['domain'][0]!r} .. {f['domain'][1]!r}")
    lines.append("outputs: " + ", ".join(json.dumps(t["name"]) for t in d["targets"]))
    metrics = d["metadata"].get("metrics", {})
    for split, values in sorted(metrics.items()):
        lines.append(f"{split}: " + ", ".join(f"{k} {v}" for k, v in sorted(values.items())))
    lines.append(f"nodes saturated over the whole domain: {d['saturated_nodes_on_domain']} of {d['nodes']}")
    diagnostics = d["metadata"].get("diagnostics", {})
    if diagnostics:
        lines.append("generator diagnostics: " + ", ".join(f"{k} {v}" for k, v in sorted(diagnostics.items())))
    if "estimate" in d:
        e = d["estimate"]
        lines.append(f"estimated {e['precision']} export error: max abs {e['max_abs_error']:.3e} "
                     f"(worst-case bound {max(e['worst_case_bound']):.3e})")
    return "\n".join(lines)

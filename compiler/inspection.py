"""What ``nodecast inspect`` shows: sizes, domain, metrics, node diagnostics and error estimates."""

from __future__ import annotations

import json

import numpy as np

from nodecast.compiler import typical_error
from nodecast.compiler.activations import get_activation
from nodecast.compiler.reference import hidden_layer

SATURATION = 0.01  # a node is saturated where its slope is below 1% of the slope at its inflection
DUPLICATE_TOLERANCE = 1e-3  # pre-activation units: tanh or logistic values then differ <= 1e-3
LISTED = 20  # nodes listed by index in the text output


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
    middle = (0.5 * (net.domain_low + net.domain_high))[None, :]
    centre = hidden_layer(net.replace(categorical_names=(), categorical_levels=(),
                                      level_weights=None), middle)[0]
    radius = np.abs(weights) @ (0.5 * (net.domain_high - net.domain_low))
    low, high = centre - radius, centre + radius
    for c, group in enumerate(net.categorical_levels):  # every level of every categorical input
        vectors = net.level_weights[net.level_start(c) : net.level_start(c) + len(group)]
        low, high = low + vectors.min(axis=0), high + vectors.max(axis=0)
    saturated = saturated_nodes(net.activation, low, high)
    return {"z_low": low.tolist(), "z_high": high.tolist(), "saturated": int(saturated.sum()),
            "saturated_threshold": SATURATION,
            "saturated_nodes": [int(j) for j in np.flatnonzero(saturated)]}


DUPLICATE_SCAN_NODES = 5000  # the pair scan is quadratic in the nodes: larger models are not scanned


def duplicate_nodes(net) -> list[dict] | None:
    """Node pairs whose pre-activations (or one's negative) differ by at most
    ``DUPLICATE_TOLERANCE`` anywhere in the declared domain: ``nodecast shrink`` merges them.
    None for a model of more than ``DUPLICATE_SCAN_NODES`` nodes (not scanned)."""
    from nodecast.compiler.passes.shrink import duplicate_pairs

    if net.n_nodes > DUPLICATE_SCAN_NODES:
        return None
    return [{"node": j, "like": i, "sign": s, "max_difference": d}
            for j, i, s, d in duplicate_pairs(net, DUPLICATE_TOLERANCE)]


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
        "categorical": [{"name": name, "levels": list(group)} for name, group in
                        zip(net.categorical_names, net.categorical_levels, strict=True)],
        "targets": [{"name": name, "unit": unit}
                    for name, unit in zip(net.target_names, net.target_units, strict=True)],
        "class_labels": list(net.class_labels), "nodes": net.n_nodes,
        "parameters": int(net.hidden_weights.size + net.hidden_biases.size + net.output_weights.size
                          + net.output_bias.size + net.level_weights.size),
        "max_abs_output_weight": float(np.max(np.abs(net.output_weights * net.output_scale))),
        "saturated_nodes_on_domain": ranges["saturated"],
        "saturated_node_indices": ranges["saturated_nodes"],
        "duplicate_nodes": duplicate_nodes(net),
        "saturated_nodes_on_training_data": None if training is None else training["saturated"],
        "node_z_range_on_domain": _span(ranges),
        "node_z_range_on_training_data": None if training is None else _span(training),
        "metadata": bundle.metadata,
    }
    if precision:
        description["estimate"] = typical_error.estimate(net, precision).as_dict()
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
    """The text of ``inspect``: what the model is, how it was made, from which data, how it did."""
    lines = [f"bundle {d['bundle_id']}", f"{d['task']}, {d['nodes']} {d['activation']} nodes, "
             f"{d['parameters']} parameters, max |output weight| {d['max_abs_output_weight']:.3g}"]
    meta = d["metadata"]
    lines += _made_lines(meta)
    lines.append("features (in input order):")
    for f in d["features"]:
        lines.append(f"  {_name(f['name'])}{_unit(f['unit'])}: domain {_exact(f['domain'][0])} .. "
                     f"{_exact(f['domain'][1])}")
    for c in d.get("categorical", []):
        lines.append(f"  {_name(c['name'])}: categorical, levels (code: text) "
                     + ", ".join(f"{k}: {_name(level)}" for k, level in enumerate(c["levels"])))
    if d["task"] == "classification":
        labels = d["class_labels"]
        lines.append(f"classes ({len(labels)}): " + ", ".join(_name(label) for label in labels[:20])
                     + (f", ... and {len(labels) - 20} more" if len(labels) > 20 else ""))
    else:
        lines.append("outputs: " + ", ".join(f"{_name(t['name'])}{_unit(t['unit'])}"
                                             for t in d["targets"]))
    lines += _metric_lines(_record(meta, "metrics"))
    lines.append(f"nodes saturated over the whole domain: {d['saturated_nodes_on_domain']} of {d['nodes']}"
                 + _span_text(d["node_z_range_on_domain"]))
    lines.extend(_node_lists(d))
    training = d["saturated_nodes_on_training_data"]
    lines.append("nodes saturated over the training data: " + (
        "not recorded" if training is None else
        f"{training} of {d['nodes']}" + _span_text(d["node_z_range_on_training_data"])))
    diagnostics = _record(meta, "diagnostics")
    if diagnostics:
        lines.append("fit diagnostics: " + ", ".join(f"{k.replace('_', ' ')} {_plain(v)}"
                                                     for k, v in sorted(diagnostics.items())))
    if "cost" in d:
        lines.extend(_cost_lines(d["cost"]))
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


def _record(meta: dict, key: str) -> dict:
    value = meta.get(key)
    return value if isinstance(value, dict) else {}


def _name(text) -> str:
    """A name as is when it is plain, else quoted with escapes (no control characters through)."""
    text = str(text)
    plain = text and text.isprintable() and not any(c in text for c in " \"',[]")
    return text if plain else json.dumps(text)


def _unit(unit) -> str:
    return f" [{_name(unit)}]" if unit else ""


def _exact(value: float) -> str:
    """The shortest text that reads back as exactly this float (a domain bound is a promise)."""
    return repr(float(value))


def _plain(value) -> str:
    """A metadata value without brackets: a list of one number as that number, lists joined."""
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v) for v in value) if value else "none"
    if isinstance(value, float):
        return f"{value:.4g}"
    return _name(value) if isinstance(value, str) else str(value)


def _made_lines(meta: dict) -> list[str]:
    settings, ridge = _record(meta, "settings"), _record(meta, "ridge")
    lines = []
    if settings:
        neighbours = _record(meta, "diagnostics").get("neighbors", settings.get("n_neighbors"))
        parts = [f"method {_plain(settings.get('method', '?'))}"]
        if settings.get("method") == "data-driven":
            parts += [f"neighbours {_plain(neighbours)}",
                      f"slope scale {_plain(settings.get('slope_scale'))}"]
        else:
            parts.append(f"interval u {_plain(settings.get('interval'))}")
        if "value" in ridge:
            rule = ridge.get("rule", "?")
            parts.append(f"ridge {_plain(ridge['value'])} ("
                         + ("given" if rule == "given" else f"automatic, {_plain(rule)}") + ")")
        parts.append(f"seed {_plain(meta.get('seed', settings.get('random_state')))}")
        lines.append("made with: " + ", ".join(parts))
    selection = _record(meta, "selection")
    if selection:
        text = (f"chosen by select: {_plain(selection.get('folds'))}-fold cross-validation over "
                f"{_plain(selection.get('grid_points'))} grid points")
        if selection.get("precision"):
            text += f", for {_plain(selection['precision'])}"
            if selection.get("tolerance") is not None:
                text += (f" within {_plain(selection['tolerance'])} ("
                         f"{_plain(selection.get('rejected_by_budget'))} points over budget)")
        if selection.get("grown"):
            text += ", then grown in batches"
        lines.append(text)
    data = _record(meta, "training_data")
    rows, outside = meta.get("rows"), meta.get("rows_outside_domain")
    text = f"training data: {_plain(rows)} rows" if rows is not None else "training data:"
    if outside:
        text += f" ({_plain(outside)} outside the declared domain)"
    text += (f", SHA-256 {_plain(data.get('sha256'))}" if data.get("sha256")
             else ", SHA-256 not recorded (bundle made before it was)")
    return lines + [text]


_METRIC_NAMES = {"rmse": "RMSE", "max_abs_error": "max abs error", "accuracy": "accuracy",
                 "rmse_mean": "RMSE", "rmse_std": "+/-"}


def _metric_lines(metrics: dict) -> list[str]:
    lines = []
    for split in ("training", "validation", "cross_validation"):
        values = metrics.get(split)
        if not isinstance(values, dict):
            continue
        parts = [f"{_METRIC_NAMES[k]} {_plain(values[k])}" for k in _METRIC_NAMES if k in values]
        extra = [f"{_plain(values[k])} {k}" for k in ("folds", "rows") if k in values]
        lines.append(f"{split.replace('_', '-')}: " + " ".join(parts).replace(" +/-", " +/-")
                     + (f" ({', '.join(extra)})" if extra else ""))
    return lines


def _span_text(span: dict) -> str:
    return (f" (pre-activations from {span['min_low']:.3g} to {span['max_high']:.3g}, median node "
            f"width {span['median_width']:.3g})")


def target_cost(bundle, precision: str) -> dict:
    """Footprint and instructions per prediction of the C artifact in ``precision`` with the
    default options (fixed point clamps out-of-domain inputs), as ``emit --to c`` reports them."""
    from nodecast.compiler.backends import render

    artifact = render(bundle, "c", precision=precision, footprint=True,
                      instruction_count=True)
    summary = artifact.summary
    return {"precision": precision, "activation_impl": summary["activation_impl"],
            "weight_bytes": summary["weight_bytes"], "footprint": summary["footprint"],
            "instructions": summary["instructions"]}


def _cost_lines(cost: dict) -> list[str]:
    from nodecast.compiler.instruction_count import format_counts
    from nodecast.compiler.toolchain import format_footprint

    return [f"C cost ({cost['precision']}, activation {cost['activation_impl']}):",
            format_footprint(cost["footprint"], cost["weight_bytes"]),
            format_counts(cost["instructions"])]


def _node_lists(d: dict) -> list[str]:
    """The saturated nodes and near-duplicate pairs by index (the first ``LISTED``)."""
    lines = []
    saturated = d["saturated_node_indices"]
    if saturated:
        more = f" and {len(saturated) - LISTED} more" if len(saturated) > LISTED else ""
        lines.append("  saturated (nearly constant) nodes: "
                     + ", ".join(map(str, saturated[:LISTED])) + more)
    pairs = d["duplicate_nodes"]
    if pairs is None:
        lines.append(f"near-duplicate node pairs: not scanned (more than {DUPLICATE_SCAN_NODES} "
                     "nodes)")
        pairs = []
    else:
        lines.append(f"near-duplicate node pairs (pre-activations within "
                     f"{DUPLICATE_TOLERANCE:g} over the domain): {len(pairs)}")
    for p in pairs[:LISTED]:
        lines.append(f"  node {p['node']} = {'' if p['sign'] == 1 else '-'}node {p['like']} "
                     f"(max difference {p['max_difference']:.2g})")
    if len(pairs) > LISTED:
        lines.append(f"  and {len(pairs) - LISTED} more")
    return lines

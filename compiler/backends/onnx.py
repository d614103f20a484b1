"""ONNX back-end: a standard graph another team can load in any runtime, and trust.

Graph, for n features, M nodes and t outputs (batch dimension dynamic, named "batch"):

    features [batch, n] -> (clamp: Max/Min with the domain) -> (explicit scaling: Sub, Div)
      -> Gemm(A^T, b) -> Sigmoid | Tanh -> Gemm(B^T, c) -> outputs [batch, t]
    classifiers also: outputs -> ArgMax -> Gather(class labels) -> label [batch] (string)
    with flag_out_of_domain: features -> outside the box or NaN? -> outside_domain [batch] (bool)

With categorical inputs a second input ``levels`` [batch, C] (int64) holds each row's level codes
(the positions in ``nodecast.categorical_levels``); per categorical input c a Gather picks the
level's row of a table (levels x M) and an Add puts it onto the pre-activations after the first
Gemm. A code that names no level picks an extra zero row under "pass" and row 0 under "clamp", and
marks the row in ``outside_domain``. ONNX has no string lookup in its default domain, so the level
texts travel in the metadata and the caller maps text to code.

Input scaling is folded into the first Gemm unless folding would grow the rounding of the
pre-activations by more than ``FOLD_GROWTH_LIMIT`` (the pre-activation term of the error estimate,
computed from the IR on fixed probes: a deterministic rule, see
:mod:`nodecast.compiler.passes.scaling`); output scaling is always folded, since it never costs more
than the final rounding of the output.
"""

from __future__ import annotations

import json

import numpy as np

from nodecast.compiler.backends import Artifact
from nodecast.compiler.bounds import certify
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.passes.scaling import (
    FOLD_GROWTH_LIMIT,
    folded_input_layer,
    folded_output_layer,
    should_fold_inputs,
)
from nodecast.compiler.typical_error import estimate
from nodecast.compiler.version import __version__

# The default operator set is the oldest one the graph needs, so that older runtimes load it
# (docs/onnx.md). Every op we emit exists in the form we use by opset 9, whose IR version 4 is the
# first that lets initializers stay out of the graph inputs; the out-of-domain flag's ReduceMin
# takes its axes as an input only from opset 18. tests/compiler/test_onnx_opset.py checks that each
# graph passes onnx's full check and runs in onnxruntime at its default, and fails one below it.
OLDEST_OPSET = 9
LEVELS_OPSET = 12  # categorical inputs: GreaterOrEqual (the known-level test) is opset 12
FLAG_OPSET = 18
NEWEST_OPSET = 28
# IR version that goes with each opset, from the ONNX versioning table (onnx.helper.VERSION_TABLE).
IR_VERSION_FOR_OPSET = {9: 4, 10: 5, 11: 6, 12: 7, 13: 7, 14: 7, 15: 8, 16: 8, 17: 8, 18: 8, 19: 9,
                        20: 9, 21: 10, 22: 10, 23: 11, 24: 12, 25: 13, 26: 13, 27: 13, 28: 14}
SUPPORTED_OPSETS = tuple(IR_VERSION_FOR_OPSET)


def needed_opset(flag_out_of_domain: bool, categorical: bool = False) -> int:
    """The oldest opset of the graph emitted with these options (the default)."""
    if flag_out_of_domain:
        return FLAG_OPSET
    return LEVELS_OPSET if categorical else OLDEST_OPSET
INPUT_NAME = "features"
LEVELS_NAME = "levels"
OUTPUT_NAME = "outputs"
LABEL_NAME = "label"
FLAG_NAME = "outside_domain"
_ACTIVATION_OP = {"logistic": "Sigmoid", "tanh": "Tanh"}


def render(bundle, precision: str = "float32", opset: int | None = None,
           out_of_domain: str = "pass", flag_out_of_domain: bool = False) -> Artifact:
    needed = needed_opset(flag_out_of_domain, bundle.network.n_categorical > 0)
    opset = needed if opset is None else opset
    if opset < needed:
        raise NodecastError(f"opset {opset} is too old for this graph: it needs opset {needed} or "
                            "newer (--flag-out-of-domain: ReduceMin with its axes as an input; "
                            "categorical inputs: GreaterOrEqual)")
    model, summary = build_model(bundle, precision, opset, out_of_domain, flag_out_of_domain)
    return Artifact("onnx", {"model.onnx": model.SerializeToString(deterministic=True)}, True, summary)


class _Graph:
    """Nodes and initializers of one graph, in the artifact's float type."""

    def __init__(self, precision: str):
        from onnx import TensorProto

        self.dtype = np.float32 if precision == "float32" else np.float64
        self.elem = TensorProto.FLOAT if precision == "float32" else TensorProto.DOUBLE
        self.nodes, self.initializers = [], []

    def const(self, name: str, value, dtype=None) -> str:
        from onnx import numpy_helper

        array = np.asarray(value, dtype=dtype or self.dtype)
        self.initializers.append(numpy_helper.from_array(array, name))
        return name

    def node(self, op: str, inputs, output: str, **attributes) -> str:
        from onnx import helper

        self.nodes.append(helper.make_node(op, list(inputs), [output], **attributes))
        return output


def _hidden_input(g: _Graph, net, out_of_domain: str):
    """The tensor the first Gemm reads, with the weights and biases that act on it."""
    x = INPUT_NAME
    if out_of_domain == "clamp":
        x = g.node("Max", [x, g.const("domain_low", net.domain_low)], "above_low")
        x = g.node("Min", [x, g.const("domain_high", net.domain_high)], "clamped")
    if should_fold_inputs(net):
        weights, biases = folded_input_layer(net)
        return x, weights, biases, "folded"
    x = g.node("Sub", [x, g.const("input_offset", net.input_offset)], "shifted")
    x = g.node("Div", [x, g.const("input_scale", net.input_scale)], "normalised")
    return x, net.hidden_weights, net.hidden_biases, "explicit"


def _level_stage(g: _Graph, net, z: str, out_of_domain: str) -> tuple[str, list[str]]:
    """Add each row's level vectors to the pre-activations ``z``; (new z, per-input "known" flags)."""
    known_flags = []
    for c, levels in enumerate(net.categorical_levels):
        size = len(levels)
        start = net.level_start(c)
        table = net.level_weights[start : start + size]
        if out_of_domain == "pass":  # an unknown level picks the zero row at the end
            table = np.vstack([table, np.zeros((1, net.n_nodes))])
        code = g.node("Gather", [LEVELS_NAME, g.const(f"level_column_{c}", c, dtype=np.int64)],
                      f"level_code_{c}", axis=1)
        not_negative = g.node("GreaterOrEqual", [code, g.const(f"level_zero_{c}", 0,
                                                               dtype=np.int64)], f"level_ge_{c}")
        below = g.node("Less", [code, g.const(f"level_count_{c}", size, dtype=np.int64)],
                       f"level_lt_{c}")
        known = g.node("And", [not_negative, below], f"level_known_{c}")
        fallback = size if out_of_domain == "pass" else 0
        index = g.node("Where", [known, code, g.const(f"level_fallback_{c}", fallback,
                                                      dtype=np.int64)], f"level_index_{c}")
        vector = g.node("Gather", [g.const(f"level_table_{c}", table), index],
                        f"level_vector_{c}", axis=0)
        z = g.node("Add", [z, vector], f"pre_activation_{c}")
        known_flags.append(known)
    return z, known_flags


def _label_stage(g: _Graph, net) -> None:
    g.const("class_labels", np.array(net.class_labels, dtype=object), dtype=object)
    best = g.node("ArgMax", [OUTPUT_NAME], "best_class", axis=1, keepdims=0)
    g.node("Gather", ["class_labels", best], LABEL_NAME, axis=0)


def _flag_stage(g: _Graph, net, known_levels=()) -> None:
    """outside_domain: True where any feature is below, above, or NaN (comparisons with NaN fail),
    or a level is unknown."""
    from onnx import TensorProto

    below_ok = g.node("GreaterOrEqual", [INPUT_NAME, g.const("flag_low", net.domain_low)], "not_below")
    above_ok = g.node("LessOrEqual", [INPUT_NAME, g.const("flag_high", net.domain_high)], "not_above")
    inside = g.node("And", [below_ok, above_ok], "feature_inside")
    inside = g.node("Cast", [inside], "feature_inside_int", to=TensorProto.INT32)
    axes = g.const("flag_axes", [1], dtype=np.int64)
    row = g.node("ReduceMin", [inside, axes], "row_inside", keepdims=0)
    if not known_levels:
        g.node("Equal", [row, g.const("flag_zero", 0, dtype=np.int32)], FLAG_NAME)
        return
    outside = g.node("Equal", [row, g.const("flag_zero", 0, dtype=np.int32)], "feature_outside")
    for c, known in enumerate(known_levels):
        unknown = g.node("Not", [known], f"level_unknown_{c}")
        outside = g.node("Or", [outside, unknown],
                         FLAG_NAME if c == len(known_levels) - 1 else f"outside_{c}")


def build_model(bundle, precision="float32", opset=OLDEST_OPSET, out_of_domain="pass",
                flag_out_of_domain=False):
    """Return (ModelProto, summary) for the bundle's network, checked with ``full_check``."""
    import onnx
    from onnx import TensorProto, helper

    net = bundle.network
    g = _Graph(precision)
    x, weights, biases, scaling = _hidden_input(g, net, out_of_domain)
    out_weights, out_bias = folded_output_layer(net)
    z = g.node("Gemm", [x, g.const("hidden_weights", weights), g.const("hidden_biases", biases)],
               "pre_activation", transB=1)
    z, known_levels = _level_stage(g, net, z, out_of_domain)
    h = g.node(_ACTIVATION_OP[net.activation], [z], "hidden")
    g.node("Gemm", [h, g.const("output_weights", out_weights.T), g.const("output_bias", out_bias)],
           OUTPUT_NAME, transB=1)
    outputs = [helper.make_tensor_value_info(OUTPUT_NAME, g.elem, ["batch", net.n_outputs])]
    if net.task == "classification":
        _label_stage(g, net)
        outputs.append(helper.make_tensor_value_info(LABEL_NAME, TensorProto.STRING, ["batch"]))
    if flag_out_of_domain:
        _flag_stage(g, net, known_levels)
        outputs.append(helper.make_tensor_value_info(FLAG_NAME, TensorProto.BOOL, ["batch"]))
    inputs = [helper.make_tensor_value_info(INPUT_NAME, g.elem, ["batch", net.n_features])]
    if net.n_categorical:
        inputs.append(helper.make_tensor_value_info(LEVELS_NAME, TensorProto.INT64,
                                                    ["batch", net.n_categorical]))
    graph = helper.make_graph(g.nodes, "nodecast_network", inputs, outputs, initializer=g.initializers,
                              doc_string=_input_order(net))
    graph.input[0].doc_string = _input_order(net)
    summary = {"precision": precision, "opset": opset, "input_scaling": scaling,
               "out_of_domain": out_of_domain, "estimate": estimate(net, precision).as_dict(),
               "certificate": certify(net, "onnx", precision).as_dict(),
               "nodes": len(g.nodes)}
    model = helper.make_model(graph, producer_name="nodecast", producer_version=__version__,
                              opset_imports=[helper.make_opsetid("", opset)],
                              ir_version=IR_VERSION_FOR_OPSET[opset], doc_string=_doc(bundle, summary))
    model.model_version = 1
    helper.set_model_props(model, _metadata(bundle, summary))
    onnx.checker.check_model(model, full_check=True)
    return model, summary


def _metadata(bundle, summary) -> dict[str, str]:
    net = bundle.network
    return {
        "nodecast.bundle_id": bundle.bundle_id,
        "nodecast.tool_version": __version__,
        "nodecast.task": net.task,
        "nodecast.input": INPUT_NAME,
        "nodecast.feature_names": json.dumps(list(net.feature_names)),
        "nodecast.feature_units": json.dumps(list(net.feature_units)),
        "nodecast.target_names": json.dumps(list(net.target_names)),
        "nodecast.target_units": json.dumps(list(net.target_units)),
        "nodecast.class_labels": json.dumps(list(net.class_labels)),
        "nodecast.domain": json.dumps([[float(lo), float(hi)] for lo, hi in
                                       zip(net.domain_low, net.domain_high, strict=True)]),
        "nodecast.precision": summary["precision"],
        "nodecast.out_of_domain": summary["out_of_domain"],
        "nodecast.input_scaling": summary["input_scaling"],
        "nodecast.error_estimate": json.dumps(summary["estimate"]["per_output"]),
        "nodecast.certified_bound": json.dumps(summary["certificate"]["certified_bound"]),
        "nodecast.bound_assumes": summary["certificate"]["assumes"],
        **({"nodecast.levels_input": LEVELS_NAME,
            "nodecast.categorical_names": json.dumps(list(net.categorical_names)),
            "nodecast.categorical_levels": json.dumps([list(group) for group in
                                                       net.categorical_levels])}
           if net.n_categorical else {}),
    }


def _input_order(net) -> str:
    """The columns of the input tensor in order, for the graph's and the input's doc strings."""
    return (f"Input {INPUT_NAME!r} [batch, {net.n_features}], columns in this order: "
            + "; ".join(f"{i}: {json.dumps(name)} [{json.dumps(unit)}] {float(lo)!r} .. {float(hi)!r}"
                        for i, (name, unit, lo, hi) in enumerate(zip(
                            net.feature_names, net.feature_units, net.domain_low, net.domain_high,
                            strict=True))))


def _doc(bundle, summary) -> str:
    net = bundle.network
    lines = [f"nodecast {__version__} network, bundle {bundle.bundle_id}.",
             f"Input {INPUT_NAME!r} [batch, {net.n_features}] {summary['precision']}, features in order "
             "(name, unit, declared domain):"]
    for i, (name, unit, lo, hi) in enumerate(zip(net.feature_names, net.feature_units,
                                                 net.domain_low, net.domain_high, strict=True)):
        lines.append(f"  {i}: {json.dumps(name)} {json.dumps(unit)} {float(lo)!r} .. {float(hi)!r}")
    if net.n_categorical:
        lines.append(f"Input {LEVELS_NAME!r} [batch, {net.n_categorical}] int64, one level code "
                     "per categorical input (code: level text); a code that names no level is "
                     "the out-of-domain case:")
        for i, (name, levels) in enumerate(zip(net.categorical_names, net.categorical_levels,
                                               strict=True)):
            codes = ", ".join(f"{k}: {json.dumps(level)}" for k, level in enumerate(levels))
            lines.append(f"  {i}: {json.dumps(name)} {codes}")
    lines.append(f"Output {OUTPUT_NAME!r} [batch, {net.n_outputs}] (name, unit):")
    for i, (name, unit) in enumerate(zip(net.target_names, net.target_units, strict=True)):
        lines.append(f"  {i}: {json.dumps(name)} {json.dumps(unit)}")
    if net.task == "classification":
        lines.append(f"Output {LABEL_NAME!r} [batch]: the class label of the highest score "
                     "(scores are least-squares fits of class indicators, not probabilities).")
    lines += [
        f"Inputs outside the domain: {summary['out_of_domain']}. Input scaling "
        f"{summary['input_scaling']} (folded unless that grows pre-activation rounding over "
        f"{FOLD_GROWTH_LIMIT:g}x).",
        f"Certified max abs error vs the trained model over the declared domain, per output: "
        f"{summary['certificate']['certified_bound']!r} (assumes "
        f"{summary['certificate']['assumes']}).",
        f"Typical error (an estimate, not a bound), per output: "
        f"{summary['estimate']['per_output']!r}.",
        "A fitted model is not a safety function: verify it on the declared input domain, guard "
        "inputs outside it, and follow the functional-safety standards, codes and licensed "
        "practice that apply.",
    ]
    return "\n".join(lines)

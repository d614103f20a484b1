"""ONNX back-end: a standard graph another team can load in any runtime, and trust.

Graph, for n features, M nodes and t outputs (batch dimension dynamic):

    features [N, n] -> (clamp: Max/Min with the domain) -> (unfolded: Sub offset, Div scale)
      -> Gemm(A^T, b) -> Sigmoid | Tanh -> Gemm(B^T, c) -> outputs [N, t]
    classifiers also: outputs -> ArgMax -> Gather(class labels) -> label [N]
    with flag_out_of_domain: features -> inside the box? -> outside_domain [N] (bool)

Input scaling is folded into the first Gemm unless folding would grow the rounding of the
pre-activations by more than ``FOLD_GROWTH_LIMIT`` (a deterministic rule computed from the IR on fixed
probes, see :mod:`nodecast.compiler.passes.scaling`); output scaling is always folded.
"""

from __future__ import annotations

import json

import numpy as np

from nodecast.compiler.backends import Artifact
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.numerics import estimate
from nodecast.compiler.passes.scaling import (
    folded_input_layer,
    folded_output_layer,
    should_fold_inputs,
)
from nodecast.compiler.version import __version__

DEFAULT_OPSET = 21
SUPPORTED_OPSETS = (17, 18, 19, 20, 21)
PRECISIONS = ("float32", "float64")
INPUT_NAME = "features"
OUTPUT_NAME = "outputs"
LABEL_NAME = "label"
FLAG_NAME = "outside_domain"
_OP = {"logistic": "Sigmoid", "tanh": "Tanh"}


def render(bundle, precision: str = "float32", opset: int = DEFAULT_OPSET,
           out_of_domain: str = "pass", flag_out_of_domain: bool = False, **_ignored) -> Artifact:
    if precision not in PRECISIONS:
        raise NodecastError(f"ONNX takes precision float32 or float64, not {precision!r}")
    if opset not in SUPPORTED_OPSETS:
        raise NodecastError(f"opset {opset!r} is not supported; choose one of {SUPPORTED_OPSETS}")
    if out_of_domain not in ("pass", "clamp"):
        raise NodecastError(f"ONNX takes out-of-domain policy 'pass' or 'clamp', not {out_of_domain!r}")
    model, summary = build_model(bundle, precision, opset, out_of_domain, flag_out_of_domain)
    return Artifact("onnx", {"model.onnx": model.SerializeToString(deterministic=True)}, True, summary)


def build_model(bundle, precision="float32", opset=DEFAULT_OPSET, out_of_domain="pass",
                flag_out_of_domain=False):
    """Return (ModelProto, summary) for the bundle's network; checked with full_check."""
    import onnx
    from onnx import TensorProto, helper, numpy_helper

    net = bundle.network
    dtype = np.float32 if precision == "float32" else np.float64
    elem = TensorProto.FLOAT if precision == "float32" else TensorProto.DOUBLE
    init = []

    def const(name, value):
        init.append(numpy_helper.from_array(np.asarray(value, dtype=dtype), name))
        return name

    nodes, x = [], INPUT_NAME
    if out_of_domain == "clamp":
        nodes.append(helper.make_node("Max", [x, const("domain_low", net.domain_low)], ["above_low"]))
        nodes.append(helper.make_node("Min", ["above_low", const("domain_high", net.domain_high)],
                                      ["clamped"]))
        x = "clamped"
    fold = should_fold_inputs(net)
    if fold:
        weights, biases = folded_input_layer(net)
    else:
        nodes.append(helper.make_node("Sub", [x, const("input_offset", net.input_offset)], ["shifted"]))
        nodes.append(helper.make_node("Div", ["shifted", const("input_scale", net.input_scale)],
                                      ["normalised"]))
        x, weights, biases = "normalised", net.hidden_weights, net.hidden_biases
    out_weights, out_bias = folded_output_layer(net)
    nodes += [
        helper.make_node("Gemm", [x, const("hidden_weights", weights), const("hidden_biases", biases)],
                         ["pre_activation"], transB=1),
        helper.make_node(_OP[net.activation], ["pre_activation"], ["hidden"]),
        helper.make_node("Gemm", ["hidden", const("output_weights", out_weights.T),
                                  const("output_bias", out_bias)], [OUTPUT_NAME], transB=1),
    ]
    outputs = [helper.make_tensor_value_info(OUTPUT_NAME, elem, ["batch", net.n_outputs])]
    if net.task == "classification":
        init.append(numpy_helper.from_array(np.array(net.class_labels, dtype=object), "class_labels"))
        nodes += [helper.make_node("ArgMax", [OUTPUT_NAME], ["best"], axis=1, keepdims=0),
                  helper.make_node("Gather", ["class_labels", "best"], [LABEL_NAME], axis=0)]
        outputs.append(helper.make_tensor_value_info(LABEL_NAME, TensorProto.STRING, ["batch"]))
    if flag_out_of_domain:
        nodes += _flag_nodes(helper, TensorProto, const, net)
        outputs.append(helper.make_tensor_value_info(FLAG_NAME, TensorProto.BOOL, ["batch"]))
    err = estimate(net, precision)
    graph = helper.make_graph(
        nodes, "nodecast_network",
        [helper.make_tensor_value_info(INPUT_NAME, elem, ["batch", net.n_features])],
        outputs, initializer=init)
    summary = {"precision": precision, "opset": opset, "input_scaling": "folded" if fold else
               "explicit", "estimate": err.as_dict(), "nodes": len(nodes)}
    model = helper.make_model(
        graph, producer_name="nodecast", producer_version=__version__,
        opset_imports=[helper.make_opsetid("", opset)], ir_version=_ir_version(opset),
        doc_string=_doc(bundle, summary, out_of_domain))
    model.model_version = 1
    helper.set_model_props(model, _metadata(bundle, summary, out_of_domain))
    onnx.checker.check_model(model, full_check=True)
    return model, summary


def _flag_nodes(helper, TensorProto, const, net):
    """Nodes computing outside_domain: True where any feature is below, above or NaN."""
    from onnx import numpy_helper

    axes = numpy_helper.from_array(np.array([1], dtype=np.int64))
    zero = numpy_helper.from_array(np.array(0, dtype=np.int32))
    return [
        helper.make_node("GreaterOrEqual", [INPUT_NAME, const("flag_low", net.domain_low)],
                         ["not_below"]),
        helper.make_node("LessOrEqual", [INPUT_NAME, const("flag_high", net.domain_high)],
                         ["not_above"]),
        helper.make_node("And", ["not_below", "not_above"], ["feature_inside"]),
        helper.make_node("Cast", ["feature_inside"], ["feature_inside_int"], to=TensorProto.INT32),
        helper.make_node("Constant", [], ["flag_axes"], value=axes),
        helper.make_node("ReduceMin", ["feature_inside_int", "flag_axes"], ["row_inside"], keepdims=0),
        helper.make_node("Constant", [], ["flag_zero"], value=zero),
        helper.make_node("Equal", ["row_inside", "flag_zero"], [FLAG_NAME]),
    ]


def _ir_version(opset: int) -> int:
    # IR version paired with each opset by the ONNX versioning table (onnx/helper.py VERSION_TABLE).
    return {17: 8, 18: 8, 19: 9, 20: 9, 21: 10}[opset]


def _metadata(bundle, summary, out_of_domain) -> dict[str, str]:
    net = bundle.network
    domain = {name: [float(lo), float(hi)] for name, lo, hi in
              zip(net.feature_names, net.domain_low, net.domain_high)}
    return {
        "nodecast.bundle_id": bundle.bundle_id,
        "nodecast.feature_names": json.dumps(list(net.feature_names)),
        "nodecast.feature_units": json.dumps(list(net.feature_units)),
        "nodecast.target_names": json.dumps(list(net.target_names)),
        "nodecast.target_units": json.dumps(list(net.target_units)),
        "nodecast.domain": json.dumps([domain[name] for name in net.feature_names]),
        "nodecast.task": net.task,
        "nodecast.class_labels": json.dumps(list(net.class_labels)),
        "nodecast.precision": summary["precision"],
        "nodecast.out_of_domain": out_of_domain,
        "nodecast.error_estimate": json.dumps(summary["estimate"]["per_output"]),
    }


def _doc(bundle, summary, out_of_domain) -> str:
    net = bundle.network
    lines = [f"nodecast {__version__} network, bundle {bundle.bundle_id}.",
             f"Input '{INPUT_NAME}' [batch, {net.n_features}], {summary['precision']}, features in order:"]
    for i, (name, unit, lo, hi) in enumerate(zip(net.feature_names, net.feature_units,
                                                 net.domain_low, net.domain_high)):
        lines.append(f"  {i}: {json.dumps(name)} [{json.dumps(unit)}] domain {lo!r} .. {hi!r}")
    lines.append(f"Output '{OUTPUT_NAME}' [batch, {net.n_outputs}]:")
    for i, (name, unit) in enumerate(zip(net.target_names, net.target_units)):
        lines.append(f"  {i}: {json.dumps(name)} [{json.dumps(unit)}]")
    if net.task == "classification":
        lines.append(f"Output '{LABEL_NAME}' [batch]: the class label of the highest score.")
    lines += [
        f"Out-of-domain inputs: {out_of_domain}; input scaling {summary['input_scaling']}.",
        f"Estimated max abs error vs the float64 model: {summary['estimate']['per_output']!r}.",
        "A fitted model is not a safety function: verify it on the declared input domain, guard "
        "inputs outside it, and follow the functional-safety standards and codes that apply.",
    ]
    return "\n".join(lines)

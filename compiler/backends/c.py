"""C back-end: a header and a source in C99 that read like a small hand-written library.

``render`` validates the options, formats every number and every piece of user text in Python
(:mod:`~nodecast.compiler.backends.c_format`), and fills the templates ``templates/c/model.h.j2``
and ``model.c.j2``. The float32/float64 layout lives in :mod:`~nodecast.compiler.backends.c_float`,
the q15/q31 one in :mod:`~nodecast.compiler.backends.c_fixed` (formats from
:mod:`nodecast.compiler.fixedpoint`). The footprint (sizes and stack on the host and on Cortex-M)
is measured by :mod:`nodecast.compiler.toolchain` when asked for, the instructions per prediction
on emulated Cortex-M cores by :mod:`nodecast.compiler.instruction_count`.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler import typical_error
from nodecast.compiler.backends import Artifact
from nodecast.compiler.backends.c_board import board_files
from nodecast.compiler.backends.c_fixed import fixed_context
from nodecast.compiler.backends.c_float import DEFAULT_FLOAT_IMPLS, float_context
from nodecast.compiler.backends.c_format import (
    _with_point,
    c_comment,
    c_string,
    check_prefix,
    double_literal,
)
from nodecast.compiler.bounds import certify
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.fixedpoint import FIXED_PRECISIONS
from nodecast.compiler.ir import OUT_OF_DOMAIN_POLICIES
from nodecast.compiler.version import __version__

PRECISIONS = ("float64", "float32", "q31", "q15")
ACTIVATION_IMPLS = ("libm", "rational", "table")
DEFAULT_IMPLS = {**DEFAULT_FLOAT_IMPLS, "q31": "table", "q15": "table"}
_IMPL_TEXT = {
    "libm": "the C library's {fn}",
    "rational": "a rational approximation x P(x^2)/Q(x^2), clipped at |x| = 9 (no libm)",
    "table": "a {size}-interval table with linear interpolation (no libm)",
}
_POLICY_TEXT = {
    "pass": "pass: inputs outside the domain are evaluated as given (the estimate covers the "
            "domain only)",
    "clamp": "clamp: each input is clipped into its domain before evaluation",
    "reject": "reject: {p}_predict returns {P}_ERROR_OUT_OF_DOMAIN and leaves y untouched",
}


def render(bundle, precision: str = "float32", prefix: str = "model", out_of_domain: str = "pass",
           activation_impl: str | None = None, table_size: int | None = None,
           footprint: bool = False, bare_metal: bool = False, instruction_count: bool = False,
           **_ignored) -> Artifact:
    """Render ``<prefix>.h`` and ``<prefix>.c`` for ``bundle``; see docs/c-backend.md."""
    check_prefix(prefix)
    if precision not in PRECISIONS:
        raise NodecastError(f"C takes precision {', '.join(PRECISIONS)}, not {precision!r}")
    if out_of_domain not in OUT_OF_DOMAIN_POLICIES:
        raise NodecastError(f"--out-of-domain is clamp, pass or reject, not {out_of_domain!r}")
    fixed = precision in FIXED_PRECISIONS
    if fixed and out_of_domain == "pass":
        raise NodecastError(f"{precision} integers hold the declared domain only, so inputs "
                            "outside it cannot pass; choose --out-of-domain clamp or reject")
    impl = activation_impl or DEFAULT_IMPLS[precision]
    if impl not in ACTIVATION_IMPLS:
        raise NodecastError(f"--activation-impl is one of {', '.join(ACTIVATION_IMPLS)}, "
                            f"not {impl!r}")
    net = bundle.network
    if fixed and net.n_categorical:
        raise NodecastError(f"{precision} artifacts do not take categorical inputs yet; choose "
                            "float32 or float64")
    _check_label_lengths(net.class_labels)
    make_context = fixed_context if fixed else float_context
    context = make_context(net, precision, impl, table_size)
    if fixed:
        from nodecast.compiler.fixedpoint_error import estimate as fixed_estimate

        estimate = fixed_estimate(net, precision, table_size=context["plan"].table_size)
    else:
        estimate = typical_error.estimate(net, precision, activation_error=context["activation_error"])
    certificate = certify(net, "c", precision, activation_impl=impl,
                          table_size=context.get("table_size") if not fixed
                          else context["plan"].table_size)
    context.update(_common_context(bundle, precision, prefix, out_of_domain, impl, estimate,
                                   context))
    context.update(_bound_context(net, certificate))
    files = {f"{prefix}.h": _render_template("model.h.j2", context),
             f"{prefix}.c": _render_template("model.c.j2", context)}
    summary = {"precision": precision, "estimate": estimate.as_dict(), "prefix": prefix,
               "certificate": certificate.as_dict(),
               "activation_impl": impl, "activation_error": context["activation_error"],
               "out_of_domain": out_of_domain, "weight_bytes": context["weight_bytes"],
               "scratch_bytes": context["scratch_bytes"]}
    if footprint:
        from nodecast.compiler.toolchain import footprint as measure_footprint

        summary["footprint"] = measure_footprint(files, prefix, uses_libm=impl == "libm")
    if instruction_count:
        from nodecast.compiler.instruction_count import instruction_counts

        summary["instructions"] = instruction_counts(files, net, prefix, precision)
    if bare_metal:
        files.update(board_files())
    return Artifact("c", files, False, summary)


C99_STRING_LIMIT = 4095  # ISO C99 5.2.4.1: the characters a string literal must be able to hold


def _check_label_lengths(labels) -> None:
    """A class label becomes a string literal; longer than C99 guarantees, -Wpedantic refuses it."""
    for label in labels:
        size = len(label.encode("utf-8"))
        if size > C99_STRING_LIMIT:
            raise NodecastError(f"class label {label[:20]!r}... is {size} bytes; a C99 string "
                                f"literal holds at most {C99_STRING_LIMIT}; shorten the labels")


def _render_template(name: str, context: dict) -> bytes:
    from nodecast.templates import render

    # Every piece of user text was escaped already; ASCII is a last check that nothing slipped by.
    return render("c", name, **context).encode("ascii")


def _common_context(bundle, precision, prefix, policy, impl, estimate, context) -> dict:
    net, upper = bundle.network, prefix.upper()
    fixed = precision in FIXED_PRECISIONS
    size = context.get("table_size") or (context["plan"].table_size if fixed else 0)
    impl_text = _IMPL_TEXT[impl].format(fn=context.get("tanh_function", ""), size=size)
    logistic = net.activation == "logistic"
    return {
        "prefix": prefix, "PREFIX": upper, "guard": f"NODECAST_{upper}_H", "version": __version__,
        "bundle_id": bundle.bundle_id, "precision": precision, "out_of_domain": policy,
        "activation": net.activation, "activation_impl": impl, "activation_impl_text": impl_text,
        "activation_error_literal": double_literal(context["activation_error"]),
        "activation_error_text": f"{context['activation_error']:.3g}"
                                 + (" (halved for a logistic node)" if logistic else ""),
        "activation_text": ("logistic, as 1/2 + tanh(z/2)/2" if logistic else "tanh")
                           + f", tanh from {impl_text}",
        "table_size": size, "fixed": fixed, "classifier": net.task == "classification",
        "n_inputs": net.n_features, "n_outputs": net.n_outputs, "n_nodes": net.n_nodes,
        "io_type": context["word"] if fixed else context["real"],
        "summary_line": f"{net.task} network: {_count(net.n_features, 'input')} -> "
                        f"{_count(net.n_outputs, 'output')}, {net.n_nodes} {net.activation} nodes, "
                        f"{precision}.",
        "precision_text": _precision_text(precision),
        "policy_text": _POLICY_TEXT[policy].format(P=upper, p=prefix),
        "policy_bounds": policy != "pass",
        "bound_type": context["word"] if fixed else context["real"],
        "domain_low": context["input_low"] if fixed else context["domain_low"],
        "domain_high": context["input_high"] if fixed else context["domain_high"],
        "z_range": _z_range(net), "estimate_lines": _estimate_lines(net, estimate),
        "input_lines": _input_lines(net, context), "output_lines": _output_lines(net, context),
        "format_lines": _format_lines(context) if fixed else [],
        "layout_lines": _layout_lines(fixed, upper),
        "return_text": _return_text(fixed, policy, upper),
        "class_names": [c_string(label) for label in net.class_labels],
        **_level_context(net, context),
    }


def stated_activation_error(net, precision: str, impl: str | None, table_size: int | None) -> float:
    """The ACTIVATION_ERROR an artifact with these options states (what verify expects)."""
    if precision in FIXED_PRECISIONS:
        from nodecast.compiler.fixedpoint import table_error

        return table_error(precision, table_size)
    from nodecast.compiler.backends.c_float import activation_error

    return activation_error(impl or DEFAULT_IMPLS[precision], precision, table_size)


def _bound_context(net, certificate) -> dict:
    lines = [f"y[{o}] {c_comment(name)}: {value:.3g} [{c_comment(unit)}]"
             for o, (name, unit, value) in enumerate(zip(net.target_names, net.target_units,
                                                         certificate.per_output, strict=True))]
    return {"bound_lines": lines, "bound_assumes": certificate.assumption,
            "bound_literals": [_with_point(repr(float(v))) for v in certificate.per_output]}


def _level_context(net, context) -> dict:
    """Categorical inputs: per input its level table (levels x tiles x tile, in the hidden
    layer's tiles, the padding nodes copying the last node) and the header's code listing."""
    from nodecast.compiler.backends.c_float import tiled_rows

    tables = []
    for c, (name, levels) in enumerate(zip(net.categorical_names, net.categorical_levels,
                                           strict=True)):
        start = net.level_start(c)
        weights = net.level_weights[start : start + len(levels)]
        tables.append({
            "count": len(levels), "name": c_comment(name),
            "rows": tiled_rows(weights, context["tile"], context["n_tiles"], context["literal"]),
            "codes": [f"{k} = {c_comment(level)}" for k, level in enumerate(levels)],
            "strings": [c_string(level) for level in levels]})
    return {"n_categorical": net.n_categorical, "level_tables": tables}


def _count(number: int, noun: str) -> str:
    return f"{number} {noun}" + ("" if number == 1 else "s")


def _precision_text(precision: str) -> str:
    return {"float64": "float64 (IEEE 754 binary64) inputs, outputs and arithmetic",
            "float32": "float32 (IEEE 754 binary32) inputs, outputs and arithmetic",
            "q31": "q31: int32_t inputs and outputs, 32-bit weights, 64-bit accumulators",
            "q15": "q15: int16_t inputs and outputs, 16-bit weights, 64-bit accumulators",
            }[precision]


def _z_range(net) -> str:
    weights = net.hidden_weights / net.input_scale
    centre = 0.5 * (net.domain_low + net.domain_high)
    mid = net.hidden_biases + weights @ (centre - net.input_offset)
    radius = np.abs(weights) @ (0.5 * (net.domain_high - net.domain_low))
    low, high = mid - radius, mid + radius
    for c, levels in enumerate(net.categorical_levels):  # over every level
        vectors = net.level_weights[net.level_start(c) : net.level_start(c) + len(levels)]
        low, high = low + vectors.min(axis=0), high + vectors.max(axis=0)
    return f"{float(np.min(low)):.4g} .. {float(np.max(high)):.4g}"


def _estimate_lines(net, estimate) -> list[str]:
    return [f"y[{o}] {c_comment(name)}: {value:.3g} [{c_comment(unit)}]"
            for o, (name, unit, value) in enumerate(zip(net.target_names, net.target_units,
                                                        estimate.per_output, strict=True))]


def _input_lines(net, context) -> list[str]:
    lines = []
    for i, (name, unit) in enumerate(zip(net.feature_names, net.feature_units, strict=True)):
        line = (f"x[{i}] {c_comment(name)} [{c_comment(unit)}], domain "
                f"{float(net.domain_low[i])!r} .. {float(net.domain_high[i])!r}")
        if "plan" in context:
            line += f", Q{context['plan'].input_frac[i]}"
        lines.append(line)
    return lines


def _output_lines(net, context) -> list[str]:
    lines = []
    for o, (name, unit) in enumerate(zip(net.target_names, net.target_units, strict=True)):
        line = f"y[{o}] {c_comment(name)} [{c_comment(unit)}]"
        if net.task == "classification":
            line += f", class {c_comment(net.class_labels[o])}"
        if "plan" in context:
            line += f", Q{context['plan'].result_frac[o]}"
        lines.append(line)
    return lines


def _format_lines(context) -> list[str]:
    plan, word = context["plan"], context["word"]
    bits, norm = plan.word_bits, plan.norm_frac
    product = f"{word} x {word} -> {context['wide']}"
    hidden_pre = (f", each product first shifted right by {plan.hidden_pre_shift} (rounding) so "
                  "that n of them fit" if plan.hidden_pre_shift else "")
    output_pre = (f", each product first shifted right by {plan.output_pre_shift} (rounding)"
                  if plan.output_pre_shift else "")
    return [
        f"Inputs: {word} in the Q format listed per input; the domain is clamped or checked in",
        f"that format, then each input is centred and normalised into Q{norm} (-1 .. 1).",
        f"Hidden layer: weights in Q{plan.hidden_frac} times inputs in Q{norm} ({product}),",
        f"summed with the bias in an int64 accumulator in Q{plan.hidden_acc_frac}{hidden_pre}.",
        f"Activation: the accumulator is clamped to +-{plan.table_reach:g}, rounded into Q5.26 and",
        f"interpolated in a {plan.table_size}-interval tanh table; the result is in Q{bits - 1}.",
        "Logistic nodes are 1/2 + tanh(z/2)/2, the halves folded into the weights and biases.",
        f"Output layer: weights in Q{', Q'.join(map(str, plan.output_frac))} times tanh in "
        f"Q{bits - 1} ({product}),",
        f"summed with the bias in int64{output_pre}, then rounded into the output's Q format and",
        f"saturated to +-{context['word_max']} instead of overflowing. No sum can overflow: every",
        "accumulator's bound was checked when the code was generated.",
        "Right shifts of negative values are taken to be arithmetic, as GCC, Clang and Arm's",
        "compilers implement them (C99 leaves them implementation-defined).",
    ]


def _layout_lines(fixed: bool, upper: str) -> list[str]:
    if fixed:
        return ["Layout: node-major weights; one pass over the nodes computes each node's",
                "pre-activation, its tanh and its share of every output, so the stack holds only",
                f"the normalised inputs and the output accumulators ({upper}_SCRATCH_BYTES)."]
    return ["Layout: the nodes go in tiles; each tile's pre-activations build up in registers",
            "(input by input), pass through tanh and add their share of each output to",
            "interleaved partial sums, so node values are never stored. The stack holds the",
            f"normalised inputs, one tile and the partial sums ({upper}_SCRATCH_BYTES).",
            "Build with -ffp-contract=off for results that match other builds bit for bit",
            "(fused multiply-add changes the last bits, within the stated estimate)."]


def _return_text(fixed: bool, policy: str, upper: str) -> str:
    codes = [] if fixed else [f"{upper}_ERROR_NAN_INPUT"]
    if policy == "reject":
        codes.append(f"{upper}_ERROR_OUT_OF_DOMAIN")
    if not codes:
        return f"{upper}_OK (always)."
    return f"{upper}_OK, or " + " or ".join(codes) + " (then y is untouched)."

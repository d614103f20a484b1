"""The header's prose of a C artifact: the lines that describe inputs, outputs, formats, layout,
status codes and working memory (formatted in Python, so the templates hold layout only)."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.backends.c_format import c_comment


def count(number: int, noun: str) -> str:
    return f"{number} {noun}" + ("" if number == 1 else "s")


def precision_text(precision: str) -> str:
    return {"float64": "float64 (IEEE 754 binary64) inputs, outputs and arithmetic",
            "float32": "float32 (IEEE 754 binary32) inputs, outputs and arithmetic",
            "q31": "q31: int32_t inputs and outputs, 32-bit weights, 64-bit accumulators",
            "q15": "q15: int16_t inputs and outputs, 16-bit weights, 64-bit accumulators",
            }[precision]


def z_range(net) -> str:
    from nodecast.compiler.passes.scaling import folded_input_layer

    weights, biases = folded_input_layer(net)
    centre = 0.5 * (net.domain_low + net.domain_high)
    mid = biases + weights @ centre
    radius = np.abs(weights) @ (0.5 * (net.domain_high - net.domain_low))
    low, high = mid - radius, mid + radius
    for c, levels in enumerate(net.categorical_levels):  # over every level
        vectors = net.level_weights[net.level_start(c) : net.level_start(c) + len(levels)]
        low, high = low + vectors.min(axis=0), high + vectors.max(axis=0)
    return f"{float(np.min(low)):.4g} .. {float(np.max(high)):.4g}"


def estimate_lines(net, estimate) -> list[str]:
    return [f"y[{o}] {c_comment(name)}: {value:.3g} [{c_comment(unit)}]"
            for o, (name, unit, value) in enumerate(zip(net.target_names, net.target_units,
                                                        estimate.per_output, strict=True))]


def input_lines(net, context) -> list[str]:
    lines = []
    for i, (name, unit) in enumerate(zip(net.feature_names, net.feature_units, strict=True)):
        line = (f"x[{i}] {c_comment(name)} [{c_comment(unit)}], domain "
                f"{float(net.domain_low[i])!r} .. {float(net.domain_high[i])!r}")
        if "plan" in context:
            line += f", Q{context['plan'].input_frac[i]}"
        lines.append(line)
    return lines


def output_lines(net, context) -> list[str]:
    lines = []
    for o, (name, unit) in enumerate(zip(net.target_names, net.target_units, strict=True)):
        line = f"y[{o}] {c_comment(name)} [{c_comment(unit)}]"
        if net.task == "classification":
            line += f", class {c_comment(net.class_labels[o])}"
        if "plan" in context:
            line += f", Q{context['plan'].result_frac[o]}"
        lines.append(line)
    return lines


def format_lines(context) -> list[str]:
    plan, word = context["plan"], context["word"]
    bits, norm = plan.word_bits, plan.norm_frac
    product = f"{word} x {word} -> {context['wide']}"
    hidden_pre = (f", each product first shifted right by {context['hidden_pre_shift']} "
                  "(rounding) so that n of them fit" if context["hidden_pre_shift"] else "")
    output_pre = (f", each product first shifted right by {context['output_pre_shift']} "
                  "(rounding)" if context["output_pre_shift"] else "")
    lines = [
        f"Inputs: {word} in the Q format listed per input; the domain is clamped or checked in",
        f"that format, then each input is centred and normalised into Q{norm} (-1 .. 1)."]
    if context["per_node"]:
        lines += node_format_lines(context, product)
    else:
        lines += [
            f"Hidden layer: weights in Q{plan.hidden_frac[0]} times inputs in Q{norm} ({product}),",
            f"summed with the bias in an int64 accumulator in Q{plan.z_frac}{hidden_pre}."]
    lines += [
        f"Activation: the accumulator is clamped to +-{plan.table_reach:g}, rounded into Q5.26 and",
        f"interpolated in a {plan.table_size}-interval tanh table; the result is in Q{bits - 1}.",
        "Logistic nodes are 1/2 + tanh(z/2)/2, the halves folded into the weights and biases."]
    if context["grouped"]:
        lines += _grouped_output_lines(context, product)
    else:
        lines += [f"Output layer: weights in Q{', Q'.join(map(str, plan.output_frac[0]))} times "
                  f"tanh in Q{bits - 1} ({product}),",
                  f"summed with the bias in int64{output_pre}, then rounded into the output's Q "
                  "format and"]
    return lines + [
        f"saturated to +-{context['word_max']} instead of overflowing. No sum can overflow: every",
        "accumulator's bound was checked when the code was generated.",
        "Right shifts of negative values are taken to be arithmetic, as GCC, Clang and Arm's",
        "compilers implement them (C99 leaves them implementation-defined).",
    ]


def node_format_lines(context, product: str) -> list[str]:
    """Per-node scales: each hidden node (row) has its own weight format, and so its own
    product shift into the common accumulator format."""
    plan, prefix = context["plan"], context["prefix"]
    return [
        "Per-node scales: every hidden node j has its own formats, so that one steep node does",
        "not force every weight into coarse steps.",
        f"Hidden layer: node j's weights in Q({plan.z_frac - plan.norm_frac} + hidden_shift[j]) "
        f"({context['hidden_frac_range']}) times",
        f"inputs in Q{plan.norm_frac} ({product}); each product is shifted right by "
        "hidden_shift[j]",
        f"(rounding; {prefix}_hidden_shift in {prefix}.c) and summed with the bias in an",
        f"int64 accumulator in Q{plan.z_frac}."]


def _grouped_output_lines(context, product: str) -> list[str]:
    plan, bits, prefix = context["plan"], context["plan"].word_bits, context["prefix"]
    return [
        f"Output layer: node j's output weights (row j) in Q({plan.output_acc_frac[0] - bits + 1}"
        f" - group_up[output_group[j]]) ({context['output_frac_range']})",
        f"times tanh in Q{bits - 1} ({product}); the products of the nodes of one group",
        f"({prefix}_output_group) are summed in int64, and each group's sum is shifted left,",
        f"exactly, by {prefix}_group_up[g] into one accumulator per output in "
        f"Q{plan.output_acc_frac[0]}, summed with",
        "the bias, then rounded into the output's Q format and"]


def status_codes(fixed: bool, policy: str, upper: str) -> list[str]:
    """The enumerators of the status type: only the codes the options can return."""
    codes = [(f"{upper}_OK = 0", "y holds the outputs")]
    if not fixed:
        codes.append((f"{upper}_ERROR_NAN_INPUT = 1", "an input is NaN; y untouched"))
    if policy == "reject":
        codes.append((f"{upper}_ERROR_OUT_OF_DOMAIN = 2", "an input lies outside the declared "
                      "domain; y untouched"))
    return [f"{code}{',' if k < len(codes) - 1 else ''} /**< {text} */"
            for k, (code, text) in enumerate(codes)]


def scratch_members(context: dict, fixed: bool) -> tuple[list[str], str]:
    """The members of the scratch type and the sentence that explains them."""
    upper = context["PREFIX"]
    if fixed:
        groups = f" * {upper}_N_GROUPS" if context.get("grouped") else ""
        return ([f"{context['word']} t[{upper}_N_INPUTS]; /**< normalised inputs */",
                 f"int64_t acc[{upper}_N_OUTPUTS{groups}]; /**< output accumulators */"],
                "one pass over the nodes computes each node's value and adds its share of every "
                "output, so the working memory is the normalised inputs and the output "
                "accumulators.")
    real = context["real"]
    return ([f"{real} u[{upper}_N_INPUTS]; /**< inputs (normalised unless folded) */",
             f"{real} lanes[{upper}_N_OUTPUTS][{upper}_TILE]; /**< partial output sums */"],
            f"each tile of {upper}_TILE nodes is evaluated in registers (or {upper}_TILE values "
            "on the stack) and adds its share of every output, so the working memory is the "
            "inputs and the partial sums.")


def layout_lines(fixed: bool, upper: str) -> list[str]:
    if fixed:
        return ["Layout: node-major weights; one pass over the nodes computes each node's",
                "pre-activation, its tanh and its share of every output, so the stack holds only",
                f"the normalised inputs and the output accumulators ({upper}_SCRATCH_BYTES)."]
    return ["Layout: the nodes go in tiles; each tile's pre-activations build up in registers",
            "(input by input), pass through tanh and add their share of each output to",
            "interleaved partial sums, so node values are never stored. The stack holds the",
            f"normalised inputs, one tile and the partial sums ({upper}_SCRATCH_BYTES).",
            "Build with -ffp-contract=off for results that match other builds bit for bit",
            "(fused multiply-add changes the last bits, within the stated estimate). Never build",
            "with -ffast-math or -ffinite-math-only: the NaN test (isnan) may then be dropped."]


def return_text(fixed: bool, policy: str, upper: str) -> str:
    codes = [] if fixed else [f"{upper}_ERROR_NAN_INPUT"]
    if policy == "reject":
        codes.append(f"{upper}_ERROR_OUT_OF_DOMAIN")
    if not codes:
        return f"{upper}_OK (always)."
    return f"{upper}_OK, or " + " or ".join(codes) + " (then y is untouched)."

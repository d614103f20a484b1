"""Quantisation: Network -> :class:`~nodecast.compiler.fixedpoint.FixedPlan`, every Q format, integer
weight and shift of a q15/q31 artifact (the arithmetic is described in
:mod:`nodecast.compiler.fixedpoint`).

Accumulator widths, for word W, n inputs, M nodes (every bound is checked exactly, on the integers,
by :func:`check_accumulators` before a plan is returned):

* a hidden product is W x W bits (int32 for q15, int64 for q31), below 2^(2W-2); with its rounding
  half added and shifted right by at most 29 (q15) or 61 (q31) it stays in that type; a node's sum
  of n of them and its bias is held in int64 below 2^63 - 2^61;
* an output product is W x W bits, shifted left by at most what keeps the sum of all M of them and
  the bias below 2^63 - 2^61 in int64 (per-node scales), or pre-shifted right (per-layer scales).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.fixedpoint import (
    ACC_LIMIT,
    SCALES,
    WORD_BITS,
    Z_FRAC,
    FixedPlan,
    checked_table_size,
    frac_bits,
    pre_shift,
    quantise,
    tanh_table,
)
from nodecast.compiler.ir import Network
from nodecast.compiler.passes.quantise_inputs import input_formats, real_hidden, real_output

MAX_PRODUCT_SHIFT = {16: 29, 32: 61}  # a q15 product (int32) or q31 product (int64) shift
SUM_LIMIT = 2**63 - 2**61  # every accumulator's checked bound (a margin below int64's range)
OUTPUT_GROUPS = 8  # q15 per-node output formats: at most this many distinct ones


def make_plan(net: Network, precision: str, table_size: int | None = None,
              scales: str = SCALES[0]) -> FixedPlan:
    """Choose every Q format of ``net`` for ``precision`` ("q15" or "q31") with per-node or
    per-layer ``scales``; see :mod:`nodecast.compiler.fixedpoint`."""
    if precision not in WORD_BITS:
        raise NodecastError(f"fixed point takes precision q15 or q31, not {precision!r}")
    if scales not in SCALES:
        raise NodecastError(f"fixed-point scales are {' or '.join(SCALES)}, not {scales!r}")
    size = checked_table_size(precision, table_size)
    bits = WORD_BITS[precision]
    inputs = input_formats(net, precision)
    table, step_bits, table_error = tanh_table(precision, size)
    hidden = _hidden_by_layer(net, bits, inputs["input_frac"], inputs["input_centre"],
                              inputs["input_half"])
    if scales == "node" and _per_node_pays(hidden, net.n_features):
        hidden = _hidden_by_node(net, bits, inputs["input_frac"], inputs["input_centre"],
                                 inputs["input_half"])
    output = (_output_by_node if scales == "node" else _output_by_layer)(net, bits)
    plan = FixedPlan(precision, bits, scales, **inputs, **hidden, table=table, table_size=size,
                     table_step_bits=step_bits, table_error=table_error, **output)
    plan = _certified_result_formats(plan, net)
    check_accumulators(plan)
    return plan


def _certified_result_formats(plan: FixedPlan, net: Network) -> FixedPlan:
    """Output formats wide enough for a certified max |y| over the domain (so no output can
    saturate there), when that ceiling exceeds what the probes suggested."""
    from nodecast.compiler.bounds.fixed import certified_ceiling

    ceiling = certified_ceiling(plan, net)
    result = tuple(min(f, frac_bits(float(c), plan.word_bits - 1), acc)
                   for f, c, acc in zip(plan.result_frac, ceiling, plan.output_acc_frac, strict=True))
    result = tuple(f - 1 if (2 ** (plan.word_bits - 1) - 1) * 2.0**-f < c else f
                   for f, c in zip(result, ceiling, strict=True))
    return replace(plan, result_frac=result, output_ceiling=tuple(float(c) for c in ceiling))


def _per_node_pays(layer: dict, n_inputs: int) -> bool:
    """Per-node hidden formats pay where the per-layer weights' rounding, summed over a node's n
    inputs, is not already below the activation argument's own (half a step of Q5.26): always
    for q15; for q31 only with steep nodes (weights of 16 and more, or n beyond 2^(f - 26))."""
    weight_frac = layer["hidden_frac"][0] if layer["hidden_frac"] else Z_FRAC
    return n_inputs * 2.0 ** -(weight_frac + 1) >= 2.0 ** -(Z_FRAC + 1)


def _hidden_by_layer(net: Network, bits: int, frac, centre, half) -> dict:
    at, bt = real_hidden(net, frac, centre, half)
    norm_frac = bits - 2
    weight_frac = frac_bits(float(np.max(np.abs(at), initial=0.0)), bits - 1)
    weights = quantise(at, weight_frac, 2 ** (bits - 1) - 1)
    t_max = 2**norm_frac + 2
    bound = max((sum(abs(v) for v in row) for row in weights), default=0) * t_max
    bound += float(np.max(np.abs(bt), initial=0.0)) * 2.0 ** (weight_frac + norm_frac)
    shift = pre_shift(float(bound))
    acc_frac = weight_frac + norm_frac - shift
    m = at.shape[0]
    return {"hidden_weights": weights, "hidden_biases": quantise(bt, acc_frac, ACC_LIMIT),
            "hidden_frac": (weight_frac,) * m, "hidden_shift": (shift,) * m, "z_frac": acc_frac,
            "at": at, "bt": bt}


def _hidden_by_node(net: Network, bits: int, frac, centre, half) -> dict:
    """Node j's weights in the format its own largest weight fills; every product is shifted
    right, rounding, into one accumulator format (the biases' too): as fine as the coarsest
    node's products (q15: no finer than Q5.26), and coarse enough that every node's sum (and
    bias) stays below 2^61."""
    at, bt = real_hidden(net, frac, centre, half)
    norm_frac = bits - 2
    weight_frac = np.array([frac_bits(float(np.max(np.abs(row), initial=0.0)), bits - 1)
                            for row in at], dtype=np.int64)
    size = float(np.max(np.abs(at).sum(axis=1) * 1.01 + np.abs(bt), initial=0.0))
    fit = 60 - int(np.floor(np.log2(size))) if size > 0 else 60
    # q15: no finer than the activation's Q5.26 argument, so that every per-node q15 artifact runs
    # one activation path with 32-bit limits (its n roundings at 2^-27 are far below a q15 step);
    # q31 keeps the finer format, whose roundings would otherwise exceed the per-layer plan's
    cap = Z_FRAC if bits == 16 else fit
    z_frac = int(min(int(np.min(weight_frac + norm_frac, initial=fit)), fit, cap))
    weight_frac = np.minimum(weight_frac, z_frac - norm_frac + MAX_PRODUCT_SHIFT[bits])
    weights = quantise(at, weight_frac[:, None], 2 ** (bits - 1) - 1)
    return {"hidden_weights": weights, "hidden_biases": quantise(bt, z_frac, ACC_LIMIT),
            "hidden_frac": tuple(int(f) for f in weight_frac),
            "hidden_shift": tuple(int(f + norm_frac - z_frac) for f in weight_frac),
            "z_frac": z_frac, "at": at, "bt": bt}


def _output_ranges(net: Network) -> np.ndarray:
    from nodecast.compiler.reference import predict

    return np.max(np.abs(predict(net, domain_probes(net, count=1024))), axis=0)


def _result_formats(net: Network, bits: int, acc_frac) -> tuple[int, ...]:
    return tuple(min(frac_bits(float(r), bits - 2), int(acc))
                 for r, acc in zip(_output_ranges(net), acc_frac, strict=True))


def _output_by_layer(net: Network, bits: int) -> dict:
    beta, ct = real_output(net)
    weight_frac = tuple(frac_bits(float(np.max(np.abs(beta[:, o]), initial=0.0)), bits - 1)
                        for o in range(net.n_outputs))
    weights = quantise(beta, np.asarray(weight_frac)[None, :], 2 ** (bits - 1) - 1)
    bound = max(sum(abs(v) for v in weights[:, o]) * 2 ** (bits - 1)
                + abs(float(ct[o])) * 2.0 ** (weight_frac[o] + bits - 1)
                for o in range(net.n_outputs))
    shift = pre_shift(float(bound))
    acc_frac = tuple(f + bits - 1 - shift for f in weight_frac)
    m = beta.shape[0]
    return {"output_weights": weights, "output_biases": quantise(ct, np.asarray(acc_frac), ACC_LIMIT),
            "output_frac": np.tile(np.asarray(weight_frac, dtype=np.int64), (m, 1)),
            "output_shift": np.full(beta.shape, shift, dtype=np.int64),
            "output_acc_frac": acc_frac, "result_frac": _result_formats(net, bits, acc_frac),
            "beta": beta, "ct": ct}


def _output_by_node(net: Network, bits: int) -> dict:
    """q15: node j's output weights (row j) in the format its largest fills, but no finer than
    the accumulator, and at most ``OUTPUT_GROUPS`` - 1 bits finer than the coarsest row (the C
    sums the products of rows that share a format apart and shifts each such sum once); every
    product is shifted left, exactly, into one accumulator format, the finest whose sum over all
    nodes (and the bias) stays below 2^61 for every output. q31: products fill 62 bits, so they
    are pre-shifted into one format per output as with per-layer scales (per-node formats would
    gain nothing there: measured, docs/c-backend.md)."""
    if bits == 32:
        return _output_by_layer(net, bits)
    beta, ct = real_output(net)
    word_frac = np.array([frac_bits(float(np.max(np.abs(row), initial=0.0)), bits - 1)
                          for row in beta], dtype=np.int64)
    size = np.max(np.abs(beta).sum(axis=0) + np.abs(ct), initial=0.0) * (1 + 2.0 ** (1 - bits))
    fit = 60 - int(np.floor(np.log2(size))) if size > 0 else 60
    weight_frac = np.minimum(word_frac, fit - (bits - 1))
    weight_frac = np.minimum(weight_frac, int(np.min(weight_frac, initial=fit)) + OUTPUT_GROUPS - 1)
    acc = (int(np.max(weight_frac)) if weight_frac.size else 0) + bits - 1
    weights = quantise(beta, weight_frac[:, None], 2 ** (bits - 1) - 1)
    acc_frac = (acc,) * net.n_outputs
    shift = np.repeat((weight_frac + bits - 1 - acc)[:, None], net.n_outputs, axis=1)
    return {"output_weights": weights, "output_biases": quantise(ct, np.asarray(acc_frac), ACC_LIMIT),
            "output_frac": np.repeat(weight_frac[:, None], net.n_outputs, axis=1),
            "output_shift": shift, "output_acc_frac": acc_frac,
            "result_frac": _result_formats(net, bits, acc_frac), "beta": beta, "ct": ct}


def _shifted(value: int, shift: int) -> int:
    """|a product| bound after its shift: right shifts round (at most one more unit)."""
    return value // 2**shift + 1 if shift > 0 else value * 2**-shift


def check_accumulators(plan: FixedPlan) -> None:
    """Refuse a plan whose accumulators could overflow, checked on the integers (a guard: the
    choices above prevent it). Hidden: |bias| + sum |w| (2^(W-2) + 2) after the pre-shift, below
    2^63 - 2^61, so the node's rounding shift cannot overflow either. Output: |bias| + sum |w|
    2^(W-1) after each product's shift, below the same limit."""
    t_max = 2**plan.norm_frac + 2
    h_max = 2 ** (plan.word_bits - 1)
    hidden = max((sum(_shifted(abs(a) * t_max, s) for a in row) + abs(b)
                  for row, b, s in zip(plan.hidden_weights, plan.hidden_biases, plan.hidden_shift,
                                       strict=True)), default=0)
    shifts = np.asarray(plan.output_shift, dtype=np.int64)
    output = max(sum(_shifted(abs(v) * h_max, int(s))
                     for v, s in zip(plan.output_weights[:, o], shifts[:, o], strict=True))
                 + abs(plan.output_biases[o]) for o in range(plan.output_weights.shape[1]))
    if (max(hidden, output) >= SUM_LIMIT
            or max(plan.hidden_shift, default=0) > MAX_PRODUCT_SHIFT[plan.word_bits]):
        raise NodecastError(f"the network's weights span too wide a range for {plan.precision} "
                            "accumulators; retrain with a larger ridge or emit float32")

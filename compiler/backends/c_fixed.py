"""The q15/q31 variants of the C back-end: the integer tables and shifts of a
:class:`~nodecast.compiler.fixedpoint.FixedPlan`, formatted for the templates.

Layout for flash and stack: node-major weights (``W[j][i]``, ``O[j][o]``) so one pass over the nodes
computes each node's pre-activation, its tanh and its share of every output, with no scratch array
the size of the hidden layer: the stack holds the n normalised inputs and t output accumulators.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.backends.c_format import (
    array_body,
    array_rows,
    double_literal,
    int_literal,
)
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.fixedpoint import ACC_LIMIT, Z_FRAC


def _ints(values, bits: int) -> str:
    return array_body([int_literal(v, bits) for v in values])


def _int_rows(rows, bits: int) -> str:
    return array_rows([[int_literal(v, bits) for v in row] for row in rows])


def _rounding(shift: int) -> int:
    return 2 ** (shift - 1) if shift > 0 else 0


def fixed_context(net, plan) -> dict:
    """Template values for the q15/q31 artifact of ``plan`` (made by
    :func:`nodecast.compiler.passes.quantise.make_plan`)."""
    bits = plan.word_bits
    wide = 32 if bits == 16 else 64  # type of a product and of the normalisation
    context = {
        "plan": plan, "word": f"int{bits}_t", "wide": f"int{wide}_t",
        "word_max": 2 ** (bits - 1) - 1,
        "input_scale": [double_literal(2.0**f) for f in plan.input_frac],
        "output_scale": [double_literal(2.0**f) for f in plan.result_frac],
        "input_low": _ints(plan.input_low, bits), "input_high": _ints(plan.input_high, bits),
        "input_centre": _ints(plan.input_centre, bits),
        "input_recip": _ints(plan.input_recip, wide),
        "norm_round": _rounding(plan.norm_shift),
        "hidden_weights": _int_rows(plan.hidden_weights, bits),
        "hidden_biases": _ints(plan.hidden_biases, 64),
        "hidden_pre_shift": plan.hidden_shift[0] if len(set(plan.hidden_shift)) == 1 else 0,
        "hidden_pre_round": int_literal(_rounding(plan.hidden_shift[0]), wide)
                            if plan.hidden_shift else "0",
        "output_weights": _int_rows(plan.output_weights, bits),
        "output_biases": _ints(plan.output_biases, 64),
        "output_shift": array_body([str(a - r) for a, r in zip(plan.output_acc_frac,
                                                                plan.result_frac, strict=True)]),
        "table": _ints(plan.table, bits),
        "activation_error": plan.table_error,
    }
    context.update(_activation_argument(plan))
    context.update(_product_shifts(plan))
    groups = context.get("n_groups", 1)
    inputs = (bits // 8) * net.n_features  # padded to the accumulators' 8-byte alignment
    context["scratch_bytes"] = -(-inputs // 8) * 8 + 8 * net.n_outputs * groups
    context["weight_bytes"] = ((bits // 8) * (plan.hidden_weights.size + plan.output_weights.size
                                              + len(plan.table))
                               + 8 * (net.n_nodes + net.n_outputs)  # int64 biases
                               + (net.n_nodes if context["per_node"] else 0)  # hidden shifts
                               + ((net.n_nodes + groups) if context["grouped"] else 0))
    return context


def _product_shifts(plan) -> dict:
    """Per-layer scales, and q31 outputs: one pre-shift for every output product. Per-node
    scales: each node's shift into Q(z_frac); q15 outputs: the products of the nodes that share
    an output format are summed apart (group g) and each group's sum is shifted left, exactly,
    into the accumulator (the plan makes every shift of a node the same for all outputs)."""
    shifts = np.asarray(plan.output_shift, dtype=np.int64)
    hidden = np.asarray(plan.hidden_shift, dtype=np.int64)
    context = {"per_node": bool(np.any(hidden != hidden[0])) if hidden.size else False,
               "grouped": False}
    if context["per_node"]:
        context.update(hidden_shift=array_body([str(int(s)) for s in plan.hidden_shift]),
                       hidden_frac_range=_range_text(plan.hidden_frac))
    if np.all(shifts == shifts.flat[0]) and shifts.flat[0] >= 0:
        pre = int(shifts.flat[0])
        return {**context, "output_pre_shift": pre,
                "output_pre_round": int_literal(_rounding(pre), 64)}
    if np.any(shifts > 0) or np.any(shifts != shifts[:, :1]):
        raise NodecastError("internal: grouped output shifts must be left shifts, one per node")
    ups = sorted({int(-s) for s in shifts[:, 0]})
    if ups[0] != 0:
        raise NodecastError("internal: the finest output group must need no shift")
    return {**context, "grouped": True, "output_pre_shift": 0, "n_groups": len(ups),
            "group_up": array_body([str(u) for u in ups]),
            "output_group": array_body([str(ups.index(int(-s))) for s in shifts[:, 0]]),
            "output_frac_range": _range_text(plan.output_frac[:, 0])}


def _range_text(fracs) -> str:
    low, high = int(min(fracs)), int(max(fracs))
    return f"Q{low}" if low == high else f"Q{low} .. Q{high}"


def _activation_argument(plan) -> dict:
    """How the hidden accumulator becomes a Q5.26 tanh argument and a table position."""
    reach_bits = plan.table_step_bits
    interval_bits = Z_FRAC - reach_bits  # fraction bits inside one table interval
    used_bits = 15 if plan.word_bits == 16 else interval_bits
    drop = max(0, interval_bits - used_bits)
    shift = plan.z_frac - Z_FRAC
    if shift >= 0:
        limit = plan.table_size * 2 ** (plan.z_frac - reach_bits)
    else:
        limit = (plan.table_size * 2 ** (Z_FRAC - reach_bits)) >> -shift
    limit = min(limit, ACC_LIMIT)  # beyond the accumulator's own bound the clamp never acts
    return {
        "z_shift": shift, "z_round": int_literal(_rounding(shift), 64) if shift > 0 else "0",
        "z_limit": int_literal(limit, 64), "z_max": plan.table_size * 2**interval_bits - 1,
        "interval_bits": interval_bits, "interval_mask": 2**interval_bits - 1,
        "frac_drop": drop, "interp_shift": interval_bits - drop,
        "interp_round": _rounding(interval_bits - drop),
    }

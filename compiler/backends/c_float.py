"""The float32/float64 variants of the C back-end: weight layout and activation implementations.

Layout for speed: hidden weights are stored input-major, ``W[i][j]``, so the pre-activations of all
nodes are built by ``n`` contiguous passes over one row each (a loop the compiler vectorises), the
activation runs over the node array in one more pass, and the output sum runs in ``OUTPUT_LANES``
interleaved partial sums, which vectorise without re-association of a single sum.

Activation implementations (every node evaluates tanh; a logistic node is 1/2 + tanh(z/2)/2):

* ``libm``: the C library's tanh/tanhf.
* ``rational``: x P(x^2) / Q(x^2) with P, Q of degree 4 in x^2, fitted by us (Lawson-weighted least
  squares towards the minimax fit on [0, 9]) and clipped at |x| = 9. No libm, no branches. Its
  error is proven in :mod:`nodecast.compiler.bounds.activations` (exhaustively in float32).
* ``table``: a table over [0, 8] with linear interpolation and odd symmetry, entries offset so the
  interpolation error is zero-mean (see :mod:`nodecast.compiler.fixedpoint`). No libm.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.backends.c_format import (
    array_body,
    array_rows,
    double_literal,
    float_literal,
)
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.passes.scaling import (
    folded_input_layer,
    folded_output_layer,
    should_fold_inputs,
)

FLOAT_IMPLS = ("libm", "rational", "table")
DEFAULT_FLOAT_TABLE = 512
OUTPUT_LANES = 8
RATIONAL_CLIP = 9.0
RATIONAL_NUMERATOR = tuple(float.fromhex(h) for h in (
    "0x1.fffffcdb6827ep-1", "0x1.11e20ab7d80cfp-3", "0x1.c8fe0e7bda777p-9",
    "0x1.577562e159c00p-16", "0x1.c500602000000p-27"))
RATIONAL_DENOMINATOR = tuple(float.fromhex(h) for h in (
    "0x1p+0", "0x1.de46423730824p-2", "0x1.a76503333f2b9p-6", "0x1.57074c4f6fd98p-12",
    "0x1.9d87c6bfe8000p-21"))
FLOAT_TABLE_REACH = 8.0


def activation_error(impl: str, precision: str, table_size: int | None = None) -> float:
    """Stated max abs error of the tanh ``impl`` evaluates in C (a logistic node halves it): proven
    for rational and table, assumed for libm (see :mod:`nodecast.compiler.bounds.activations`)."""
    from nodecast.compiler.bounds.programs import c_float_activation

    return c_float_activation(precision, impl, table_size)[1]


def float_table(size: int, precision: str) -> np.ndarray:
    """tanh at size + 1 knots over [0, FLOAT_TABLE_REACH], offset for a zero-mean interpolation
    error and rounded to the precision."""
    step = FLOAT_TABLE_REACH / size
    th = np.tanh(np.arange(size + 1) * step)
    values = th + step**2 / 12.0 * 2.0 * th * (1.0 - th * th)
    return values.astype(np.float32).astype(np.float64) if precision == "float32" else values


def float_context(net, precision: str, impl: str, table_size: int | None) -> dict:
    """Template values for a float32/float64 artifact: formatted tables and activation settings."""
    if impl not in FLOAT_IMPLS:
        raise NodecastError(f"--activation-impl for {precision} is one of "
                            f"{', '.join(FLOAT_IMPLS)}, not {impl!r}")
    if table_size is not None and impl != "table":
        raise NodecastError("--table-size applies to --activation-impl table only")
    literal = float_literal if precision == "float32" else double_literal
    fold = should_fold_inputs(net)
    weights, biases = folded_input_layer(net) if fold else (net.hidden_weights, net.hidden_biases)
    out_weights, out_bias = folded_output_layer(net)
    context = {
        "real": "float" if precision == "float32" else "double",
        "fold_inputs": fold, "lanes": OUTPUT_LANES, "zero": literal(0.0), "half": literal(0.5),
        "hidden_weights": array_rows([[literal(v) for v in row] for row in weights.T]),
        "hidden_biases": array_body([literal(v) for v in biases]),
        "output_weights": array_rows([[literal(v) for v in col] for col in out_weights.T]),
        "output_biases": array_body([literal(v) for v in out_bias]),
        "domain_low": array_body([literal(v) for v in net.domain_low]),
        "domain_high": array_body([literal(v) for v in net.domain_high]),
        "input_offset": array_body([literal(v) for v in net.input_offset]),
        "input_scale": array_body([literal(v) for v in net.input_scale]),
        "tanh_function": "tanhf" if precision == "float32" else "tanh",
    }
    table = None
    if impl == "rational":
        context["numerator"] = [literal(v) for v in RATIONAL_NUMERATOR]
        context["denominator"] = [literal(v) for v in RATIONAL_DENOMINATOR]
        context["rational_clip"] = literal(RATIONAL_CLIP)
    elif impl == "table":
        size = DEFAULT_FLOAT_TABLE if table_size is None else _checked_size(table_size)
        table = float_table(size, precision)
        context.update(table_size=size, table=array_body([literal(v) for v in table]),
                       table_scale=literal(size / FLOAT_TABLE_REACH), table_limit=literal(size),
                       table_step=literal(FLOAT_TABLE_REACH / size))
    real_bytes = 4 if precision == "float32" else 8
    context["scratch_bytes"] = real_bytes * (net.n_features + net.n_nodes + OUTPUT_LANES)
    context["weight_bytes"] = real_bytes * (weights.size + biases.size + out_weights.size
                                            + out_bias.size + (0 if table is None else table.size))
    context["activation_error"] = activation_error(impl, precision, context.get("table_size"))
    return context


def _checked_size(size) -> int:
    if not (isinstance(size, int) and 16 <= size <= 65536):
        raise NodecastError(f"--table-size must be an integer 16..65536, got {size!r}")
    return size

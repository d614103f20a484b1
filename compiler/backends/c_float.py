"""The float32/float64 variants of the C back-end: weight layout and activation implementations.

Layout for speed (register tiling): the nodes are taken in tiles of ``tile``; the hidden weights
are stored ``W[t][i][k]`` (tile, input, node within the tile), so one tile's pre-activations build up
in ``tile`` independent sums that stay in registers (vector registers on a host, the FPU's registers
on a Cortex-M4F), go through the activation, and add their share of each output to ``tile``
interleaved partial sums, without ever storing the node values. The last tile is padded with
copies of the last node whose output weights are zero: each adds exactly zero for every input the
copied node is finite on (zero weights would not do: 0 times an infinite input is NaN).
``tile`` is the widest of ``TILES`` whose padding stays within ``MAX_PADDING_SHARE`` of the nodes
(32 for 500 nodes: two AVX-512 or four AVX registers per sum set; 8 for 100 nodes), since padding
costs flash and work.

Summation structure (what an error bound must follow): node j's pre-activation is
``((b_j + w_j0 u_0) + w_j1 u_1) + ... + w_j,n-1 u_n-1``, in input order; output o's lane k is the sum
over tiles t, in order, of ``v_o,j h_j`` for j = tile t + k, started from zero; the output is
``((lane_0 + lane_1) + ... + lane_tile-1) + c_o``. Each ``a + w u`` is a multiply and an add, or one
fused multiply-add where the build contracts them (GCC's default outside ISO C modes); the harness
builds with ``-ffp-contract=off``.

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
from nodecast.compiler.targets import TARGETS

DEFAULT_FLOAT_TABLE = TARGETS["c"].option("table_size").default_value("float32")
TILES = (32, 16, 8, 4)  # tile widths, widest first
MAX_PADDING_SHARE = 1 / 16
RATIONAL_CLIP = 9.0
RATIONAL_NUMERATOR = tuple(float.fromhex(h) for h in (
    "0x1.fffffcdb6827ep-1", "0x1.11e20ab7d80cfp-3", "0x1.c8fe0e7bda777p-9",
    "0x1.577562e159c00p-16", "0x1.c500602000000p-27"))
RATIONAL_DENOMINATOR = tuple(float.fromhex(h) for h in (
    "0x1p+0", "0x1.de46423730824p-2", "0x1.a76503333f2b9p-6", "0x1.57074c4f6fd98p-12",
    "0x1.9d87c6bfe8000p-21"))
FLOAT_TABLE_REACH = 8.0


def float_table(size: int, precision: str) -> np.ndarray:
    """tanh at size + 1 knots over [0, FLOAT_TABLE_REACH], offset for a zero-mean interpolation
    error and rounded to the precision."""
    from nodecast.compiler.tanh_table import offset_tanh

    values = offset_tanh(size, FLOAT_TABLE_REACH / size)
    return values.astype(np.float32).astype(np.float64) if precision == "float32" else values


def float_context(net, precision: str, impl: str, table_size: int | None) -> dict:
    """Template values for a float32/float64 artifact: formatted tables and activation settings."""
    literal = float_literal if precision == "float32" else double_literal
    fold = should_fold_inputs(net)
    weights, biases = folded_input_layer(net) if fold else (net.hidden_weights, net.hidden_biases)
    out_weights, out_bias = folded_output_layer(net)
    tile = tile_width(net.n_nodes)
    n_tiles = -(-net.n_nodes // tile)
    padded = n_tiles * tile - net.n_nodes
    tiles = [np.pad(a, [(0, padded)] + [(0, 0)] * (a.ndim - 1), mode=mode)
             for a, mode in ((weights, "edge"), (biases, "edge"), (out_weights, "constant"))]
    context = {
        "real": "float" if precision == "float32" else "double",
        "fold_inputs": fold, "tile": tile, "n_tiles": n_tiles, "padded_nodes": padded,
        "zero": literal(0.0), "half": literal(0.5),
        "hidden_weights": _tiled(tiles[0].reshape(n_tiles, tile, -1).transpose(0, 2, 1), literal),
        "hidden_biases": array_rows([[literal(v) for v in row]
                                     for row in tiles[1].reshape(n_tiles, tile)]),
        "output_weights": _tiled(tiles[2].T.reshape(-1, n_tiles, tile), literal),
        "output_biases": array_body([literal(v) for v in out_bias]),
        "domain_low": array_body([literal(v) for v in net.domain_low]),
        "domain_high": array_body([literal(v) for v in net.domain_high]),
        "input_offset": array_body([literal(v) for v in net.input_offset]),
        "input_scale": array_body([literal(v) for v in net.input_scale]),
        "tanh_function": "tanhf" if precision == "float32" else "tanh", "literal": literal,
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
    context["scratch_bytes"] = real_bytes * (net.n_features + tile * (net.n_outputs + 1))
    context["weight_bytes"] = real_bytes * (sum(a.size for a in tiles) + out_bias.size
                                            + (0 if table is None else table.size)
                                            + n_tiles * tile * net.level_weights.shape[0])
    return context


def tile_width(n_nodes: int) -> int:
    """The widest tile whose zero padding stays within ``MAX_PADDING_SHARE`` of the nodes."""
    return next((t for t in TILES if (-n_nodes) % t <= MAX_PADDING_SHARE * n_nodes), TILES[-1])


def tiled_rows(rows: np.ndarray, tile: int, n_tiles: int, literal) -> str:
    """Rows of one value per node (levels x nodes) as [row][tile][k], padded like the nodes."""
    padded = np.pad(rows, [(0, 0), (0, n_tiles * tile - rows.shape[1])], mode="edge")
    return "\n".join("    {\n" + array_rows([[literal(v) for v in block]
                                                for block in row.reshape(n_tiles, tile)], 8)
                     + "\n    }," for row in padded)


def _tiled(blocks: np.ndarray, literal) -> str:
    """A three-dimensional initialiser, one braced block of rows per leading index."""
    return "\n".join("    {\n" + array_rows([[literal(v) for v in row] for row in block], 8)
                     + "\n    }," for block in blocks)


def _checked_size(size) -> int:
    if not (isinstance(size, int) and 16 <= size <= 65536):
        raise NodecastError(f"--table-size must be an integer 16..65536, got {size!r}")
    return size

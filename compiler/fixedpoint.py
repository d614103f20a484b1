"""Fixed-point formats (Q15 in 16-bit words, Q31 in 32-bit words): the integer program of a q15/q31
artifact as a :class:`FixedPlan`, and its tanh table. The plan is made from a network by the
quantisation pass :func:`nodecast.compiler.passes.quantise.make_plan`; its export-error estimate is
in :mod:`nodecast.compiler.typical_error.fixed`, its certified bound in
:mod:`nodecast.compiler.bounds.fixed`.

The arithmetic, for word size W (16 or 32), n inputs, M nodes and t outputs:

1. Input i arrives as an integer x_q = round(x 2^f_i), f_i chosen per feature so that the domain
   fills about half the word (a bit of headroom lets a rejecting artifact see values beyond it).
   The domain is clamped or checked on x_q, then centred and normalised:
   t_i = (x_q - centre_i) * recip_i >> norm_shift, t in Q(W-2), |t| <= 1 on the domain.
2. Hidden layer: z_j = B_j + sum_i A_ji t_i, node j's weights in Q(hidden_frac[j]); each product
   is shifted right (rounding) by hidden_shift[j] into the int64 accumulator, Q(z_frac) for every
   node. Per-node scales (``scales="node"``) give each node (row) the format its own largest
   weight fills, and so its own product shift; per-layer scales (``"layer"``) give every node the
   format of the largest weight of the layer and one pre-shift (zero for q15; for q31 where the
   sum of n products would not fit 63 bits).
   Logistic nodes are evaluated as 1/2 + tanh(z/2)/2 with the halves folded into the weights, so
   every node evaluates tanh.
3. tanh from a table of ``table_size`` + 1 entries in Q(W-1) over [0, K 2^-e], linear interpolation,
   odd symmetry, saturation beyond the table; the argument is first brought into Q5.26 (int32).
4. Output layer: y_o = C_o + sum_j Bo_jo h_j, weight (j, o) in Q(output_frac[j, o]); the product
   with h (Q(W-1)) is shifted by output_shift[j, o] into output o's int64 accumulator,
   Q(output_acc_frac[o]) (a positive shift: right, rounding; negative: left, exact). Per-layer
   scales: one format per output, products pre-shifted right where the sum would not fit 63 bits.
   Per-node scales: one format per node (row), products shifted left, exactly, into an
   accumulator as fine as the finest node's products allow within 63 bits. The sum is rounded
   and saturated into the output word, Q(result_frac[o]).

Every scale comes from ranges that hold on the declared domain (|t| <= 1, the weights' magnitudes,
the outputs' range over deterministic probes, widened to a certified max |y| over the whole domain
(:func:`nodecast.compiler.bounds.fixed.certified_ceiling`) so that no output saturates there), and
every accumulator bound is checked when the plan is made, so the generated code cannot overflow.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.tanh_table import offset_tanh
from nodecast.compiler.targets import FIXED_PRECISIONS, TABLE_SIZE_RANGE, TARGETS

WORD_BITS = {"q15": 16, "q31": 32}
SCALES = TARGETS["c"].option("scales").choices  # per node (row) or per layer; the first is the default
DEFAULT_TABLE_SIZE = {p: TARGETS["c"].option("table_size").default_value(p) for p in FIXED_PRECISIONS}
Z_FRAC = 26  # activation argument in Q5.26: |z| < 32 fits an int32 with a bit to spare
_SATURATION = {"q15": 6.0, "q31": 8.0}  # table reach: 1 - tanh(6) = 1.2e-5, 1 - tanh(8) = 2.3e-7
ACC_LIMIT = 2**62
INTERPOLATION_ROUNDING = 0.52  # steps of Q(W-1): half a step, plus the truncated fraction's share


@dataclass(frozen=True, eq=False)
class FixedPlan:
    """Every integer table and shift of a fixed-point artifact (see the module doc for the roles).

    Integer arrays hold Python ints (dtype object) so that no value is ever rounded by float64.
    ``at``, ``bt``, ``beta``, ``ct`` are the exact real-valued weights the integers approximate.
    """

    precision: str
    word_bits: int
    scales: str
    input_frac: tuple[int, ...]
    input_low: tuple[int, ...]
    input_high: tuple[int, ...]
    input_centre: tuple[int, ...]
    input_half: tuple[int, ...]
    input_recip: tuple[int, ...]
    norm_shift: int
    norm_frac: int
    hidden_weights: np.ndarray  # (M, n) ints, node-major
    hidden_biases: np.ndarray  # (M,) ints, in Q(z_frac)
    hidden_frac: tuple[int, ...]  # (M,) per node
    hidden_shift: tuple[int, ...]  # (M,) right shift (rounding) of each of node j's products
    z_frac: int  # the hidden accumulators' format
    table: tuple[int, ...]
    table_size: int
    table_step_bits: int
    table_error: float
    output_weights: np.ndarray  # (M, t) ints, node-major
    output_biases: np.ndarray  # (t,) ints, in Q(output_acc_frac[o])
    output_frac: np.ndarray  # (M, t) ints: the format of each output weight
    output_shift: np.ndarray  # (M, t) ints: right shift (negative: left) of each product
    output_acc_frac: tuple[int, ...]
    result_frac: tuple[int, ...]
    at: np.ndarray
    bt: np.ndarray
    beta: np.ndarray
    ct: np.ndarray
    output_ceiling: tuple[float, ...] = ()  # certified max |y| over the domain, per output

    @property
    def table_reach(self) -> float:
        """The table covers tanh arguments 0 .. table_reach; beyond it tanh saturates."""
        return self.table_size * 2.0**-self.table_step_bits

    def node_rounding(self) -> np.ndarray:
        """(M,) bound, in real units, on the rounding of each node's argument before the table:
        its shifted products (half a step of Q(z_frac) each) and the shift into Q5.26."""
        n = self.hidden_weights.shape[1]
        shifted = np.asarray(self.hidden_shift, dtype=np.int64) > 0
        products = np.where(shifted, 0.5 * n * 2.0**-self.z_frac, 0.0)
        return products + (0.5 * 2.0**-Z_FRAC if self.z_frac > Z_FRAC else 0.0)

    def output_rounding(self) -> np.ndarray:
        """(t,) bound on the rounding of the right-shifted products, in real units."""
        shifted = (np.asarray(self.output_shift, dtype=np.int64) > 0).sum(axis=0)
        return 0.5 * shifted * np.ldexp(1.0, -np.asarray(self.output_acc_frac))

    def real_weights(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """The integers' real values: hidden weights, hidden biases, output weights, output biases."""
        return (real_values(self.hidden_weights, np.asarray(self.hidden_frac)[:, None]),
                real_values(self.hidden_biases, self.z_frac),
                real_values(self.output_weights, np.asarray(self.output_frac, dtype=np.int64)),
                real_values(self.output_biases, np.asarray(self.output_acc_frac)))


def frac_bits(max_abs: float, value_bits: int) -> int:
    """Fraction bits that put ``max_abs`` below 2^value_bits."""
    if max_abs <= 0.0:
        return value_bits
    return value_bits - (int(np.floor(np.log2(max_abs))) + 1)


def quantise(values: np.ndarray, frac, limit: int) -> np.ndarray:
    """round(values 2^frac) as Python ints, clipped to +-limit; ``frac`` may vary per column."""
    scaled = np.rint(np.ldexp(np.asarray(values, dtype=np.float64), frac))
    scaled = np.clip(scaled, -limit, limit)
    return np.vectorize(int, otypes=[object])(scaled) if scaled.size else scaled.astype(object)


def real_values(ints: np.ndarray, frac) -> np.ndarray:
    return np.ldexp(ints.astype(np.float64), -np.asarray(frac))


def pre_shift(bound: float) -> int:
    """Right shift that brings a sum bounded by ``bound`` (integer units) below 2^62."""
    return max(0, int(np.ceil(np.log2(max(bound, 1.0)))) - 62)


def tanh_table(precision: str, size: int):
    """Entries tanh(k 2^-e) + h^2 |tanh''| / 12 (k = 0..size), rounded: the chord of a concave arc
    lies below it by up to h^2 |g''| / 8 and by h^2 |g''| / 12 on average, so the offset makes the
    interpolation error zero-mean (no bias for the output sum to accumulate)."""
    bits = WORD_BITS[precision]
    step_bits = int(np.floor(np.log2(size / _SATURATION[precision])))
    if not 0 <= step_bits <= Z_FRAC:
        raise NodecastError(f"table size {size} does not fit the {precision} activation format")
    table = quantise(offset_tanh(size, 2.0**-step_bits), bits - 1, 2 ** (bits - 1) - 1)
    return tuple(int(v) for v in table), step_bits, _table_error(table, step_bits, bits)


def table_tanh(plan: FixedPlan, z: np.ndarray) -> np.ndarray:
    """The table's tanh in exact arithmetic (the artifact adds at most INTERPOLATION_ROUNDING)."""
    values = np.asarray(plan.table, dtype=np.float64) * 2.0 ** -(plan.word_bits - 1)
    position = np.minimum(np.abs(z) * 2.0**plan.table_step_bits, plan.table_size)
    index = np.minimum(position.astype(np.int64), plan.table_size - 1)
    frac = position - index
    return np.sign(z) * (values[index] * (1.0 - frac) + values[index + 1] * frac)


def _table_error(table, step_bits: int, bits: int) -> float:
    """Max |table tanh - tanh| over all arguments: the proven error of interpolating between the
    rounded entries and of the saturated tail (:func:`nodecast.compiler.bounds.activations.
    table_errors`, the bound the float tables state too), plus the interpolation's rounding."""
    from nodecast.compiler.bounds.activations import table_errors

    values = np.asarray(table, dtype=np.float64) * 2.0 ** -(bits - 1)
    proven = table_errors(values, 2.0**-step_bits).worst
    return float(proven + INTERPOLATION_ROUNDING * 2.0 ** -(bits - 1))


def checked_table_size(precision: str, table_size: int | None) -> int:
    size = DEFAULT_TABLE_SIZE[precision] if table_size is None else table_size
    if not (isinstance(size, int) and TABLE_SIZE_RANGE[0] <= size <= TABLE_SIZE_RANGE[1]):
        raise NodecastError(f"table size must be an integer {TABLE_SIZE_RANGE[0]}.."
                            f"{TABLE_SIZE_RANGE[1]}, got {table_size!r}")
    return size


def table_error(precision: str, table_size: int | None = None) -> float:
    """The stated max error of the tanh table a ``precision`` plan would hold (no plan built)."""
    if precision not in WORD_BITS:
        raise NodecastError(f"fixed point takes precision q15 or q31, not {precision!r}")
    return tanh_table(precision, checked_table_size(precision, table_size))[2]

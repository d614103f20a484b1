"""Fixed-point formats (Q15 in 16-bit words, Q31 in 32-bit words) for a network: every integer table
and shift of an artifact that evaluates it in integer arithmetic. The export-error estimate of such
an artifact is in :mod:`nodecast.compiler.fixedpoint_error`.

The arithmetic, for word size W (16 or 32), n inputs, M nodes and t outputs:

1. Input i arrives as an integer x_q = round(x 2^f_i), f_i chosen per feature so that the domain
   fills about half the word (a bit of headroom lets a rejecting artifact see values beyond it).
   The domain is clamped or checked on x_q, then centred and normalised:
   t_i = (x_q - centre_i) * recip_i >> norm_shift, t in Q(W-2), |t| <= 1 on the domain.
2. Hidden layer: z_j = B_j + sum_i A_ji t_i, weights A in Q(hidden_frac) per layer, products summed
   in an int64 accumulator (Q31 products are pre-shifted by hidden_pre_shift where the sum of n of
   them would not fit 63 bits). Logistic nodes are evaluated as 1/2 + tanh(z/2)/2 with the halves
   folded into the weights, so every node evaluates tanh.
3. tanh from a table of ``table_size`` + 1 entries in Q(W-1) over [0, K 2^-e], linear interpolation,
   odd symmetry, saturation beyond the table; the argument is first brought into Q5.26 (int32).
4. Output layer: y_o = C_o + sum_j Bo_jo h_j, weights per output in Q(output_frac[o]), int64
   accumulator (Q31: products pre-shifted by output_pre_shift), rounded and saturated into the
   output word, Q(result_frac[o]).

Every scale comes from ranges that hold on the declared domain (|t| <= 1, the weights' magnitudes,
the outputs' range over deterministic probes, widened to a certified max |y| over the whole domain
(:func:`nodecast.compiler.bounds.fixed.certified_ceiling`) so that no output saturates there), and
every accumulator bound is checked here, so the generated code cannot overflow.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network

WORD_BITS = {"q15": 16, "q31": 32}
FIXED_PRECISIONS = tuple(WORD_BITS)
DEFAULT_TABLE_SIZE = {"q15": 512, "q31": 2048}
TABLE_SIZE_RANGE = (16, 65536)
Z_FRAC = 26  # activation argument in Q5.26: |z| < 32 fits an int32 with a bit to spare
_SATURATION = {"q15": 6.0, "q31": 8.0}  # table reach: 1 - tanh(6) = 1.2e-5, 1 - tanh(8) = 2.3e-7
_NORM_SHIFT = {"q15": 15, "q31": 30}
_MIN_HALF_STEPS = 8  # a feature needs at least 16 input steps across its domain
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
    input_frac: tuple[int, ...]
    input_low: tuple[int, ...]
    input_high: tuple[int, ...]
    input_centre: tuple[int, ...]
    input_half: tuple[int, ...]
    input_recip: tuple[int, ...]
    norm_shift: int
    norm_frac: int
    hidden_weights: np.ndarray  # (M, n) ints, node-major
    hidden_biases: np.ndarray  # (M,) ints, in Q(hidden_acc_frac)
    hidden_frac: int
    hidden_pre_shift: int
    hidden_acc_frac: int
    table: tuple[int, ...]
    table_size: int
    table_step_bits: int
    table_error: float
    output_weights: np.ndarray  # (M, t) ints, node-major
    output_biases: np.ndarray  # (t,) ints, in Q(output_acc_frac[o])
    output_frac: tuple[int, ...]
    output_pre_shift: int
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


def _frac_bits(max_abs: float, value_bits: int) -> int:
    """Fraction bits that put ``max_abs`` below 2^value_bits."""
    if max_abs <= 0.0:
        return value_bits
    return value_bits - (int(np.floor(np.log2(max_abs))) + 1)


def _quantise(values: np.ndarray, frac, limit: int) -> np.ndarray:
    """round(values 2^frac) as Python ints, clipped to +-limit; ``frac`` may vary per column."""
    scaled = np.rint(np.ldexp(np.asarray(values, dtype=np.float64), frac))
    scaled = np.clip(scaled, -limit, limit)
    return np.vectorize(int, otypes=[object])(scaled) if scaled.size else scaled.astype(object)


def real_values(ints: np.ndarray, frac) -> np.ndarray:
    return np.ldexp(ints.astype(np.float64), -np.asarray(frac))


def _input_format(name: str, lo: float, hi: float, bits: int, precision: str):
    """(frac, low, high, centre, half, recip) of one feature; the centre and half-width are
    integers of the input's own format, so centring is exact."""
    frac = _frac_bits(max(abs(lo), abs(hi)), bits - 2)
    low, high = int(np.rint(np.ldexp(lo, frac))), int(np.rint(np.ldexp(hi, frac)))
    centre = (low + high) // 2
    half = high - centre
    if hi > lo and half < _MIN_HALF_STEPS:
        raise NodecastError(
            f"feature {name!r}: its domain {lo!r} .. {hi!r} lies so far from zero that a "
            f"{precision} input resolves it into only {2 * half} steps; subtract an offset from "
            "that input before training, or emit float32")
    scale = 2 ** (_NORM_SHIFT[precision] + bits - 2)
    recip = (scale + half // 2) // half if half > 0 else 0
    return frac, low, high, centre, half, recip


def _real_hidden(net: Network, frac, centre, half):
    """Hidden weights and biases acting on t (tanh arguments: halved for logistic nodes)."""
    c = np.ldexp(np.asarray(centre, dtype=np.float64), -np.asarray(frac))
    h = np.ldexp(np.asarray(half, dtype=np.float64), -np.asarray(frac))
    at = net.hidden_weights * (h / net.input_scale)
    bt = net.hidden_biases + net.hidden_weights @ ((c - net.input_offset) / net.input_scale)
    factor = 0.5 if net.activation == "logistic" else 1.0
    return at * factor, bt * factor


def _real_output(net: Network):
    """Output weights and biases acting on tanh values, in target units."""
    beta = net.output_weights * net.output_scale
    bias = net.output_bias * net.output_scale + net.output_offset
    if net.activation == "logistic":
        return 0.5 * beta, bias + 0.5 * beta.sum(axis=0)
    return beta, bias


def _pre_shift(bound: float) -> int:
    """Right shift that brings a sum bounded by ``bound`` (integer units) below 2^62."""
    return max(0, int(np.ceil(np.log2(max(bound, 1.0)))) - 62)


def _tanh_table(precision: str, size: int):
    """Entries tanh(k 2^-e) + h^2 |tanh''| / 12 (k = 0..size), rounded: the chord of a concave arc
    lies below it by up to h^2 |g''| / 8 and by h^2 |g''| / 12 on average, so the offset makes the
    interpolation error zero-mean (no bias for the output sum to accumulate)."""
    bits = WORD_BITS[precision]
    step_bits = int(np.floor(np.log2(size / _SATURATION[precision])))
    if not 0 <= step_bits <= Z_FRAC:
        raise NodecastError(f"table size {size} does not fit the {precision} activation format")
    knots = np.arange(size + 1) * 2.0**-step_bits
    th = np.tanh(knots)
    offset = (2.0**-step_bits) ** 2 / 12.0 * 2.0 * th * (1.0 - th * th)
    table = _quantise(th + offset, bits - 1, 2 ** (bits - 1) - 1)
    return tuple(int(v) for v in table), step_bits, _table_error(table, step_bits, bits)


def table_tanh(plan: FixedPlan, z: np.ndarray) -> np.ndarray:
    """The table's tanh in exact arithmetic (the artifact adds at most INTERPOLATION_ROUNDING)."""
    values = np.asarray(plan.table, dtype=np.float64) * 2.0 ** -(plan.word_bits - 1)
    position = np.minimum(np.abs(z) * 2.0**plan.table_step_bits, plan.table_size)
    index = np.minimum(position.astype(np.int64), plan.table_size - 1)
    frac = position - index
    return np.sign(z) * (values[index] * (1.0 - frac) + values[index + 1] * frac)


def _table_error(table, step_bits: int, bits: int) -> float:
    """Max |table tanh - tanh| over all arguments: interpolation between the rounded entries (dense
    sampling of every interval, 2% margin), the saturated tail, and the interpolation's rounding."""
    values = np.asarray(table, dtype=np.float64) * 2.0 ** -(bits - 1)
    frac = np.linspace(0.0, 1.0, 33)
    knots = np.arange(len(table) - 1)[:, None] + frac[None, :]
    line = values[:-1, None] * (1.0 - frac) + values[1:, None] * frac
    interp = np.max(np.abs(line - np.tanh(knots * 2.0**-step_bits)))
    tail = 1.0 - values[-1]
    return float(max(interp, tail) * 1.02 + INTERPOLATION_ROUNDING * 2.0 ** -(bits - 1))


def _output_ranges(net: Network) -> np.ndarray:
    from nodecast.compiler.reference import predict

    return np.max(np.abs(predict(net, domain_probes(net, count=1024))), axis=0)


def make_plan(net: Network, precision: str, table_size: int | None = None) -> FixedPlan:
    """Choose every Q format of ``net`` for ``precision`` ("q15" or "q31"); see the module doc."""
    if precision not in WORD_BITS:
        raise NodecastError(f"fixed point takes precision q15 or q31, not {precision!r}")
    size = _checked_table_size(precision, table_size)
    bits = WORD_BITS[precision]
    inputs = list(zip(*(_input_format(name, float(lo), float(hi), bits, precision) for name, lo, hi
                        in zip(net.feature_names, net.domain_low, net.domain_high, strict=True)),
                      strict=True))
    frac, low, high, centre, half, recip = (tuple(column) for column in inputs)
    table, step_bits, table_error = _tanh_table(precision, size)
    plan = FixedPlan(precision, bits, frac, low, high, centre, half, recip, _NORM_SHIFT[precision],
                     bits - 2, **_hidden_layer(net, bits, frac, centre, half), table=table,
                     table_size=size, table_step_bits=step_bits, table_error=table_error,
                     **_output_layer(net, bits))
    plan = _certified_result_formats(plan, net)
    _check_bounds(plan)
    return plan


def _checked_table_size(precision: str, table_size: int | None) -> int:
    size = DEFAULT_TABLE_SIZE[precision] if table_size is None else table_size
    if not (isinstance(size, int) and TABLE_SIZE_RANGE[0] <= size <= TABLE_SIZE_RANGE[1]):
        raise NodecastError(f"table size must be an integer {TABLE_SIZE_RANGE[0]}.."
                            f"{TABLE_SIZE_RANGE[1]}, got {table_size!r}")
    return size


def table_error(precision: str, table_size: int | None = None) -> float:
    """The stated max error of the tanh table a ``precision`` plan would hold (no plan built)."""
    if precision not in WORD_BITS:
        raise NodecastError(f"fixed point takes precision q15 or q31, not {precision!r}")
    return _tanh_table(precision, _checked_table_size(precision, table_size))[2]


def _certified_result_formats(plan: FixedPlan, net: Network) -> FixedPlan:
    """Output formats wide enough for a certified max |y| over the domain (so no output can
    saturate there), when that ceiling exceeds what the probes suggested."""
    from dataclasses import replace

    from nodecast.compiler.bounds.fixed import certified_ceiling

    ceiling = certified_ceiling(plan, net)
    result = tuple(min(f, _frac_bits(float(c), plan.word_bits - 1), acc)
                   for f, c, acc in zip(plan.result_frac, ceiling, plan.output_acc_frac, strict=True))
    result = tuple(f - 1 if (2 ** (plan.word_bits - 1) - 1) * 2.0**-f < c else f
                   for f, c in zip(result, ceiling, strict=True))
    return replace(plan, result_frac=result, output_ceiling=tuple(float(c) for c in ceiling))


def _hidden_layer(net: Network, bits: int, frac, centre, half) -> dict:
    at, bt = _real_hidden(net, frac, centre, half)
    norm_frac = bits - 2
    weight_frac = _frac_bits(float(np.max(np.abs(at), initial=0.0)), bits - 1)
    weights = _quantise(at, weight_frac, 2 ** (bits - 1) - 1)
    t_max = 2**norm_frac + 2
    bound = max((sum(abs(v) for v in row) for row in weights), default=0) * t_max
    bound += float(np.max(np.abs(bt), initial=0.0)) * 2.0 ** (weight_frac + norm_frac)
    pre_shift = _pre_shift(float(bound))
    acc_frac = weight_frac + norm_frac - pre_shift
    return {"hidden_weights": weights, "hidden_biases": _quantise(bt, acc_frac, ACC_LIMIT),
            "hidden_frac": weight_frac, "hidden_pre_shift": pre_shift, "hidden_acc_frac": acc_frac,
            "at": at, "bt": bt}


def _output_layer(net: Network, bits: int) -> dict:
    beta, ct = _real_output(net)
    weight_frac = tuple(_frac_bits(float(np.max(np.abs(beta[:, o]), initial=0.0)), bits - 1)
                        for o in range(net.n_outputs))
    weights = _quantise(beta, np.asarray(weight_frac)[None, :], 2 ** (bits - 1) - 1)
    bound = max(sum(abs(v) for v in weights[:, o]) * 2 ** (bits - 1)
                + abs(float(ct[o])) * 2.0 ** (weight_frac[o] + bits - 1)
                for o in range(net.n_outputs))
    pre_shift = _pre_shift(float(bound))
    acc_frac = tuple(f + bits - 1 - pre_shift for f in weight_frac)
    result = tuple(min(_frac_bits(float(r), bits - 2), acc)
                   for r, acc in zip(_output_ranges(net), acc_frac, strict=True))
    biases = _quantise(ct, np.asarray(acc_frac), ACC_LIMIT)
    return {"output_weights": weights, "output_biases": biases,
            "output_frac": weight_frac, "output_pre_shift": pre_shift, "output_acc_frac": acc_frac,
            "result_frac": result, "beta": beta, "ct": ct}


def _check_bounds(plan: FixedPlan) -> None:
    """Refuse a plan whose accumulators could overflow (a guard: the choices above prevent it)."""
    t_max = 2**plan.norm_frac + 2
    h_max = 2 ** (plan.word_bits - 1)
    pre_h, pre_o = 2**plan.hidden_pre_shift, 2**plan.output_pre_shift
    hidden = max((sum(abs(a) * t_max // pre_h + 1 for a in row) + abs(b)
                  for row, b in zip(plan.hidden_weights, plan.hidden_biases, strict=True)),
                 default=0)
    output = max(sum(abs(v) * h_max // pre_o + 1 for v in plan.output_weights[:, o])
                 + abs(plan.output_biases[o]) for o in range(plan.output_weights.shape[1]))
    if max(hidden, output) >= 2**63 - 2**61:
        raise NodecastError(f"the network's weights span too wide a range for {plan.precision} "
                            "accumulators; retrain with a larger ridge or emit float32")


"""The real-valued side of quantisation: each input's integer format and normalisation, and the
weights that act on the normalised inputs and on the tanh values (folding the input and output
scaling, and logistic as 1/2 + tanh(z/2)/2)."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.fixedpoint import WORD_BITS, frac_bits
from nodecast.compiler.ir import Network
from nodecast.compiler.passes.scaling import folded_output_layer

NORM_SHIFT = {"q15": 15, "q31": 30}
_MIN_HALF_STEPS = 8  # a feature needs at least 16 input steps across its domain


def _input_format(name: str, lo: float, hi: float, bits: int, precision: str):
    """(frac, low, high, centre, half, recip) of one feature; the centre and half-width are
    integers of the input's own format, so centring is exact."""
    frac = frac_bits(max(abs(lo), abs(hi)), bits - 2)
    low, high = int(np.rint(np.ldexp(lo, frac))), int(np.rint(np.ldexp(hi, frac)))
    centre = (low + high) // 2
    half = high - centre
    if hi > lo and half < _MIN_HALF_STEPS:
        raise NodecastError(
            f"feature {name!r}: its domain {lo!r} .. {hi!r} lies so far from zero that a "
            f"{precision} input resolves it into only {2 * half} steps; subtract an offset from "
            "that input before training, or emit float32")
    scale = 2 ** (NORM_SHIFT[precision] + bits - 2)
    recip = (scale + half // 2) // half if half > 0 else 0
    return frac, low, high, centre, half, recip


def input_formats(net: Network, precision: str) -> dict:
    """The FixedPlan fields of the inputs and their normalisation."""
    bits = WORD_BITS[precision]
    columns = zip(*(_input_format(name, float(lo), float(hi), bits, precision) for name, lo, hi
                    in zip(net.feature_names, net.domain_low, net.domain_high, strict=True)),
                  strict=True)
    names = ("input_frac", "input_low", "input_high", "input_centre", "input_half", "input_recip")
    return {**{name: tuple(column) for name, column in zip(names, columns, strict=True)},
            "norm_shift": NORM_SHIFT[precision], "norm_frac": bits - 2}


def real_hidden(net: Network, frac, centre, half):
    """Hidden weights and biases acting on t (tanh arguments: halved for logistic nodes)."""
    c = np.ldexp(np.asarray(centre, dtype=np.float64), -np.asarray(frac))
    h = np.ldexp(np.asarray(half, dtype=np.float64), -np.asarray(frac))
    at = net.hidden_weights * (h / net.input_scale)
    bt = net.hidden_biases + net.hidden_weights @ ((c - net.input_offset) / net.input_scale)
    factor = 0.5 if net.activation == "logistic" else 1.0
    return at * factor, bt * factor


def real_output(net: Network):
    """Output weights and biases acting on tanh values, in target units (output scaling folded by
    :func:`nodecast.compiler.passes.scaling.folded_output_layer`)."""
    beta, bias = folded_output_layer(net)
    if net.activation == "logistic":
        return 0.5 * beta, bias + 0.5 * beta.sum(axis=0)
    return beta, bias

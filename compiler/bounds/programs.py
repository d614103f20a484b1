"""What each target executes, as the bound needs it: built from the same lowering the back-ends use
(:mod:`nodecast.compiler.passes.scaling`, the C float layout of
:mod:`nodecast.compiler.backends.c_float`, the fixed-point plan of :mod:`nodecast.compiler.fixedpoint`),
so the bound follows the generated code, never a description of it.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.bounds import activations as proven
from nodecast.compiler.bounds.floating import FloatProgram
from nodecast.compiler.ir import Network
from nodecast.compiler.passes.half_tanh import logistic_as_tanh
from nodecast.compiler.targets import UNIT_ROUNDOFF


def _stored(values: np.ndarray, precision: str) -> np.ndarray:
    if precision == "float32":
        return np.asarray(values, dtype=np.float32).astype(np.float64)
    return np.asarray(values, dtype=np.float64)


def _ulps(ulps: float, unit: float):
    """An activation within ``ulps`` units in the last place: ulp(h) <= 2 u |h|."""
    return lambda lo, hi, h_abs: ulps * 2.0 * unit * h_abs + 2.0**-148


def _constant(error: float):
    return lambda lo, hi, h_abs: np.full(np.shape(lo), error)


def _hidden(net: Network, precision: str, folded: bool) -> dict:
    from nodecast.compiler.passes.scaling import folded_input_layer

    weights, biases = folded_input_layer(net) if folded else (net.hidden_weights, net.hidden_biases)
    return {"folded": folded, "weights": weights, "biases": biases,
            "stored_weights": _stored(weights, precision), "stored_biases": _stored(biases, precision),
            "offset": net.input_offset, "scale": net.input_scale,
            "stored_offset": _stored(net.input_offset, precision),
            "stored_scale": _stored(net.input_scale, precision)}


def _folded_output(net: Network, precision: str, lanes: int, bias_in_sum: bool) -> dict:
    from nodecast.compiler.passes.scaling import folded_output_layer

    weights, bias = folded_output_layer(net)
    return {"output_weights": weights, "output_bias": bias,
            "stored_output_weights": _stored(weights, precision),
            "stored_output_bias": _stored(bias, precision), "lanes": lanes,
            "bias_in_sum": bias_in_sum, "bias_slack": np.zeros(net.n_outputs)}


def c_float_activation(precision: str, impl: str, table_size: int | None):
    """(error function, stated worst error) of the C float activation ``impl`` (tanh form)."""
    from nodecast.compiler.backends import c_float

    unit = UNIT_ROUNDOFF[precision]
    if impl == "libm":
        return _ulps(proven.LIBM_ULPS, unit), proven.LIBM_ULPS * 2.0 * unit
    if impl == "rational":
        error = (proven.RATIONAL_FLOAT32_ERROR if precision == "float32"
                 else proven.RATIONAL_FLOAT64_ERROR)
        return _constant(error), error
    size = c_float.DEFAULT_FLOAT_TABLE if table_size is None else table_size
    table = proven.table_errors(c_float.float_table(size, precision), c_float.FLOAT_TABLE_REACH / size)
    reach, step = c_float.FLOAT_TABLE_REACH, c_float.FLOAT_TABLE_REACH / size

    def error(lo, hi, h_abs):  # interpolation + position, product and sum roundings
        return table.over(lo, hi) + unit * (2.0 + step + 1.001 * np.minimum(hi, reach))

    return error, table.worst + unit * (2.0 + step + 1.001 * reach)


def c_float_program(net: Network, precision: str, impl: str, table_size: int | None) -> FloatProgram:
    from nodecast.compiler.backends.c_float import tile_width
    from nodecast.compiler.passes.scaling import should_fold_inputs

    error, _ = c_float_activation(precision, impl, table_size)
    unit = UNIT_ROUNDOFF[precision]
    return FloatProgram(
        unit=unit, input_unit=unit, **_hidden(net, precision, should_fold_inputs(net)),
        sequential_hidden=True, activation=net.activation,
        logistic_form="half-tanh" if net.activation == "logistic" else "tanh",
        activation_error=error,
        **_folded_output(net, precision, tile_width(net.n_nodes), False))  # lanes: the tile


def onnx_program(net: Network, precision: str) -> FloatProgram:
    """A runtime's Gemm may sum in any order: every term may take n + 1 (hidden) or M + 1 (output)
    roundings; Tanh and Sigmoid are assumed within RUNTIME_ULPS."""
    from nodecast.compiler.passes.scaling import should_fold_inputs

    unit = UNIT_ROUNDOFF[precision]
    return FloatProgram(
        unit=unit, input_unit=unit, **_hidden(net, precision, should_fold_inputs(net)),
        sequential_hidden=False, activation=net.activation,
        logistic_form="sigmoid" if net.activation == "logistic" else "tanh",
        activation_error=_ulps(proven.RUNTIME_ULPS, unit),
        **_folded_output(net, precision, 0, True))


def _unfolded(net: Network, hidden_weights, hidden_biases, output_weights, output_bias,
              bias_slack, ulps: float, form: str, activation: str) -> FloatProgram:
    unit = UNIT_ROUNDOFF["float64"]
    return FloatProgram(
        unit=unit, input_unit=0.0, folded=False, weights=hidden_weights, biases=hidden_biases,
        stored_weights=hidden_weights, stored_biases=hidden_biases, sequential_hidden=False,
        offset=net.input_offset,
        scale=net.input_scale, stored_offset=net.input_offset, stored_scale=net.input_scale,
        activation=activation, logistic_form=form, activation_error=_ulps(ulps, unit),
        output_weights=output_weights, output_bias=output_bias,
        stored_output_weights=output_weights, stored_output_bias=output_bias,
        lanes=0, bias_in_sum=False, bias_slack=bias_slack,
        post_offset=net.output_offset, post_scale=net.output_scale)


def python_program(net: Network) -> FloatProgram:
    """The standalone predictor: float64, explicit scaling, lowered through
    :func:`~nodecast.compiler.passes.half_tanh.logistic_as_tanh` as the back-end lowers it (exact
    halvings; the constant halves summed into the bias by math.fsum, one rounding)."""
    lowered = logistic_as_tanh(net)
    slack = UNIT_ROUNDOFF["float64"] * np.abs(lowered.output_bias) if lowered is not net \
        else np.zeros(net.n_outputs)
    return _unfolded(net, lowered.hidden_weights, lowered.hidden_biases, lowered.output_weights,
                     lowered.output_bias, slack, proven.LIBM_ULPS, "tanh", "tanh")


def reference_program(net: Network) -> FloatProgram:
    """The float64 NumPy reference itself (:mod:`nodecast.compiler.reference`)."""
    form = "half-tanh" if net.activation == "logistic" else "tanh"
    return _unfolded(net, net.hidden_weights, net.hidden_biases, net.output_weights,
                     net.output_bias, np.zeros(net.n_outputs), proven.NUMPY_ULPS, form,
                     net.activation)

"""Certified error of a floating-point program (C float32/float64, ONNX, the Python predictor and the
float64 reference itself) over boxes of the input domain.

A :class:`FloatProgram` says what the artifact executes: the weights as it stores them, whether the
input scaling is folded into the first layer, the order of its sums (the C back-end's: known, so
each rounding is bounded by the size of the partial sum it rounds; a runtime's Gemm or Python's
sum: any order), the activation's form and its proven or assumed error, and the output stage.
:func:`box_bounds` returns, per box, an upper bound of |program(x) - model(x)| over every real x of
the box (rounded to the program's precision on the way in), in target units, where model is the
trained network in exact arithmetic. u is the unit roundoff, gamma_k = k u / (1 - k u) (Higham,
"Accuracy and Stability of Numerical Algorithms", 2nd ed. 2002, ch. 3 and 4).

The bound splits the error in two parts.

* Errors shared by every node: the rounding of each input on the way in and of its normalisation,
  e_i per input. They move the point at which the model is evaluated, so their effect is at most
  sum_i max |dy/dx_i| e_i over the box (mean value theorem), with the gradient enclosed over the
  box by interval arithmetic; this does not grow with the size of cancelling output weights.
* Errors of each node at that point: the stored weights' exact effect on z_j (an affine function,
  exact range), the rounding of z_j's sum (sequential sums: u times each partial sum's range;
  any order: gamma_(n+1) times the sum of magnitudes), the activation's own error and its slope
  times z_j's error; then the output: sum_j |beta_j| times node j's error, the stored output
  weights' exact effect (interval over the box), and the output sum's rounding (C lanes: u times
  each partial sum's range, term by term in the generated order; any order: gamma_(M+1) sum_j
  |beta_j h_j|), the bias and the final operations (u |y| each).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.bounds.ranges import FLOAT64_UNIT, affine_ranges, gamma, matvec

# Per node: (|z| low, |z| high, largest |h|) of the activation's argument -> its absolute error.
ActivationError = Callable[[np.ndarray, np.ndarray, np.ndarray], np.ndarray]


@dataclass(frozen=True, eq=False)
class FloatProgram:
    """What a floating-point artifact computes, stage by stage (see the module doc).

    Hidden stage: ``weights``/``biases`` act on raw inputs when ``folded``, else on
    u = (x - offset) / scale computed with ``stored_offset``/``stored_scale``; ``stored_*`` are the
    values the artifact holds (exact reals), the others the model's. ``sequential_hidden``: each
    z_j starts from its bias and adds w_ji u_i for i = 0..n-1 (the C loop); else any order.
    Activation: ``logistic_form`` is "tanh" (the network is tanh), "half-tanh" (1/2 + tanh(z/2)/2
    at run time) or "sigmoid" (a runtime's own logistic). Output stage: ``lanes`` > 0 is the C
    float sum (term j into lane j mod lanes, in order, lanes from 0, then the lanes in order, then
    the bias); ``lanes`` == 0 any order with the bias in the sum (a Gemm) or after it
    (``bias_in_sum`` False); then y = post_offset + post_scale * sum when ``post_scale`` is given.
    ``extra_terms`` more terms join each node's sum (categorical inputs' level vectors, folded into
    ``biases`` for one combination of levels; their sum is then bounded in any order) and
    ``extra_z_error`` bounds what storing them separately adds.
    """

    unit: float
    input_unit: float
    folded: bool
    weights: np.ndarray
    biases: np.ndarray
    stored_weights: np.ndarray
    stored_biases: np.ndarray
    offset: np.ndarray
    scale: np.ndarray
    stored_offset: np.ndarray
    stored_scale: np.ndarray
    sequential_hidden: bool
    activation: str
    logistic_form: str
    activation_error: ActivationError
    output_weights: np.ndarray
    output_bias: np.ndarray
    stored_output_weights: np.ndarray
    stored_output_bias: np.ndarray
    lanes: int
    bias_in_sum: bool
    bias_slack: np.ndarray
    post_offset: np.ndarray | None = None
    post_scale: np.ndarray | None = None
    extra_terms: int = 0
    extra_z_error: np.ndarray | float = 0.0


def _g(name: str, z):
    return 0.5 + 0.5 * np.tanh(0.5 * z) if name == "logistic" else np.tanh(z)


def _slope_range(name: str, lo, hi):
    """(min, max) of g' over [lo, hi]: g' peaks at 0 and falls away on both sides."""
    def slope(z):
        t = np.tanh(0.5 * z) if name == "logistic" else np.tanh(z)
        return 0.25 * (1.0 - t * t) if name == "logistic" else 1.0 - t * t

    return np.minimum(slope(lo), slope(hi)) * (1 - 1e-12), slope(np.clip(0.0, lo, hi)) * (1 + 1e-12)


def _coordinates(p: FloatProgram, low, high):
    """(lo, hi, error): the box in the coordinates the hidden layer reads, and the bound on each
    coordinate's computed value's error (rounding of the input and of its normalisation)."""
    x_abs = np.maximum(np.abs(low), np.abs(high))
    if p.folded:
        return low, high, p.input_unit * x_abs
    lo, hi = (low - p.offset) / p.scale, (high - p.offset) / p.scale
    lo, hi = lo - 4 * FLOAT64_UNIT * np.abs(lo), hi + 4 * FLOAT64_UNIT * np.abs(hi)
    coord_abs = np.maximum(np.abs(lo), np.abs(hi))
    shifted = np.maximum(np.abs(low - p.offset), np.abs(high - p.offset))
    before = p.input_unit * x_abs + np.abs(p.stored_offset - p.offset)
    scale_err = np.abs(p.stored_scale - p.scale) / np.abs(p.stored_scale)
    error = (1 + 4 * p.unit) * ((before + p.unit * (shifted + before)) / np.abs(p.stored_scale)
                                + coord_abs * (scale_err + p.unit))
    return lo, hi, error


def _sum_rounding(p: FloatProgram, lo, hi) -> np.ndarray:
    """Bound on the rounding of each node's sum b_j + sum_i w_ji c_i over the coordinate box."""
    stored = p.stored_weights
    c_mid, c_rad = 0.5 * (lo + hi), 0.5 * (hi - lo)
    n = stored.shape[1]
    if not p.sequential_hidden or p.extra_terms:
        size = np.abs(p.stored_biases) + matvec(np.abs(c_mid) + c_rad, np.abs(stored))
        return gamma(n + 1 + p.extra_terms, p.unit) * size + p.extra_z_error
    terms_mid = c_mid[:, None, :] * stored[None, :, :]  # (B, M, n)
    terms_abs = np.abs(terms_mid) + c_rad[:, None, :] * np.abs(stored)[None, :, :]
    partial = np.abs(p.stored_biases[None, :, None] + np.cumsum(terms_mid, axis=2)) \
        + np.cumsum(c_rad[:, None, :] * np.abs(stored)[None, :, :], axis=2)
    first = (p.unit * (terms_abs + partial)).sum(axis=2)
    # each computed partial sum also carries the roundings before it (at most gamma_(n+1) of the
    # sum of magnitudes): n more additions of u times that, second order
    size = np.abs(p.stored_biases) + terms_abs.sum(axis=2)
    return first + n * p.unit * gamma(n + 1, p.unit) * size


def _lane_rounding(p: FloatProgram, t_mid, t_rad, size) -> np.ndarray:
    """Bound on the C lane sum's rounding: (B, t) from term intervals (B, t, M) and |terms| bound."""
    b, t, m = t_mid.shape
    lanes = p.lanes
    width = -(-m // lanes) * lanes
    pad = [(0, 0), (0, 0), (0, width - m)]
    mid = np.pad(t_mid, pad).reshape(b, t, -1, lanes)  # [..., position, lane]
    rad = np.pad(t_rad, pad).reshape(b, t, -1, lanes)
    partial = np.abs(np.cumsum(mid, axis=2)) + np.cumsum(rad, axis=2)
    additions = partial[:, :, 1:, :].sum(axis=(2, 3))  # a lane's first addition is exact
    lane_mid, lane_rad = mid.sum(axis=2), rad.sum(axis=2)
    combined = (np.abs(np.cumsum(lane_mid, axis=2)) + np.cumsum(lane_rad, axis=2))[:, :, 1:]
    # each computed partial sum also carries the roundings before it (at most gamma_(m+lanes) of
    # the sum of magnitudes): m + lanes more additions of u times that, second order
    carried = (m + lanes) * p.unit * gamma(m + lanes, p.unit) * size
    return p.unit * (additions + combined.sum(axis=2) + size) + carried


def box_bounds(p: FloatProgram, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Upper bound of |program(x) - model(x)| over each box, per output: ndarray (B, t)."""
    low, high = np.atleast_2d(low), np.atleast_2d(high)
    c_lo, c_hi, c_err = _coordinates(p, low, high)
    c_lo, c_hi = c_lo - c_err, c_hi + c_err  # where the computed coordinates may lie
    n = p.weights.shape[1]
    z_lo, z_hi = affine_ranges(p.weights, p.biases, c_lo, c_hi)
    d_lo, d_hi = affine_ranges(p.stored_weights - p.weights, p.stored_biases - p.biases, c_lo, c_hi)
    c_abs = np.maximum(np.abs(c_lo), np.abs(c_hi))
    e_z = (np.maximum(np.abs(d_lo), np.abs(d_hi)) + _sum_rounding(p, c_lo, c_hi)
           + gamma(n + 4, FLOAT64_UNIT) * (matvec(c_abs, np.abs(p.weights)) + np.abs(p.biases)))
    h_lo, h_hi, e_h = _activation_bounds(p, z_lo, z_hi, e_z)
    beta, stored = p.output_weights.T, p.stored_output_weights.T  # (t, M)
    h_mid, h_rad = 0.5 * (h_lo + h_hi), 0.5 * (h_hi - h_lo)
    h_abs = np.maximum(np.abs(h_lo), np.abs(h_hi)) + e_h
    delta = stored - beta
    error = (matvec(e_h, np.abs(stored))
             + np.abs(matvec(h_mid, delta) + (p.stored_output_bias - p.output_bias))
             + matvec(h_rad, np.abs(delta)) + p.bias_slack)
    size = matvec(h_abs, np.abs(stored))
    if p.lanes:
        t_mid = h_mid[:, None, :] * stored[None, :, :]
        t_rad = (h_rad + e_h)[:, None, :] * np.abs(stored)[None, :, :]
        error = error + _lane_rounding(p, t_mid, t_rad, size)
    else:
        m = beta.shape[1]
        extra = np.abs(p.stored_output_bias) if p.bias_in_sum else 0.0
        error = error + gamma(m + 1, p.unit) * (size + extra)
    sum_abs = np.abs(matvec(h_mid, beta) + p.output_bias) + matvec(h_rad, np.abs(beta))
    if not p.bias_in_sum:  # the bias added last: one rounding at the size of the sum
        error = error + p.unit * (sum_abs + error)
    error = error + _shared_input_error(p, z_lo, z_hi, c_err, beta)
    error = error + gamma(beta.shape[1] + n + 8, FLOAT64_UNIT) * (matvec(h_abs, np.abs(beta))
                                                                  + np.abs(p.output_bias))
    if p.post_scale is not None:  # y = offset + scale * sum, two more roundings
        scaled = p.post_scale * (sum_abs + error)
        y_abs = np.abs(p.post_offset) + scaled
        return (p.post_scale * error + p.unit * scaled * (1 + p.unit) + p.unit * y_abs
                + gamma(4, FLOAT64_UNIT) * y_abs)
    return error


def _activation_bounds(p: FloatProgram, z_lo, z_hi, e_z):
    """(h_lo, h_hi, e_h): exact activation ranges and the computed activation's error bound."""
    w_lo, w_hi = z_lo - e_z, z_hi + e_z
    h_lo, h_hi = _g(p.activation, z_lo), _g(p.activation, z_hi)
    h_abs = np.maximum(np.abs(_g(p.activation, w_lo)), np.abs(_g(p.activation, w_hi)))
    abs_lo = np.where(w_lo > 0, w_lo, np.where(w_hi < 0, -w_hi, 0.0))
    abs_hi = np.maximum(np.abs(w_lo), np.abs(w_hi))
    if p.logistic_form == "half-tanh":
        t_abs = np.tanh(abs_hi / 2.0)
        own = 0.5 * p.activation_error(abs_lo / 2.0, abs_hi / 2.0, t_abs) + p.unit * h_abs + 2.0**-148
    else:
        own = p.activation_error(abs_lo, abs_hi, h_abs)
    _, slope_max = _slope_range(p.activation, w_lo, w_hi)
    return h_lo, h_hi, slope_max * e_z + own


def _shared_input_error(p: FloatProgram, z_lo, z_hi, c_err, beta) -> np.ndarray:
    """sum_i max |dy/dc_i| e_i over the box, the gradient enclosed by interval arithmetic:
    dy/dc_i = sum_j beta_j g'(z_j) w_ji with g' in its range over the node's z interval."""
    s_lo, s_hi = _slope_range(p.activation, z_lo, z_hi)
    s_mid, s_rad = 0.5 * (s_lo + s_hi), 0.5 * (s_hi - s_lo)
    t, n = beta.shape[0], p.weights.shape[1]
    coupling = (beta[:, None, :] * p.weights.T[None, :, :]).reshape(t * n, -1)  # (t n, M)
    gradient = np.abs(matvec(s_mid, coupling)) + matvec(s_rad, np.abs(coupling))
    gradient = gradient * (1 + 1e-9)
    return (gradient.reshape(-1, t, n) * c_err[:, None, :]).sum(axis=2)

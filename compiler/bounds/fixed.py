"""Certified error of a q15/q31 C artifact over boxes of the input domain.

The integer program is the :class:`~nodecast.compiler.fixedpoint.FixedPlan` (see that module for
the arithmetic). Every step is exact integer arithmetic except where it rounds or saturates, and
each of those is bounded here, per box, in real units:

* the caller's rounding of x into Q(f_i) and the normalisation t = (x_q - centre) recip >> s
  (half an input step, the reciprocal's own rounding, half a Q(W-2) step);
* the hidden accumulator: the quantised weights' and bias' exact effect |dA . t + dB| (its range
  over the box), the inputs' rounding through |A|, each pre-shift's rounding and the rounding into
  Q5.26;
* the table: its proven per-interval error over the arguments the node can reach
  (:mod:`~nodecast.compiler.bounds.activations`), the interpolation's rounding, and tanh's slope
  times the argument's error;
* the output: sum_j |weight_j| times node j's error, the quantised output weights' and bias' exact
  effect (interval over the box), each pre-shift's rounding, the rounding into the output format,
  and saturation: clipping into [-top, top] only brings the result nearer a model value inside
  that range, so it adds the excess of |y| over top only where the model itself exceeds it (the
  plan's accumulators never overflow, which :func:`~nodecast.compiler.fixedpoint.make_plan`
  checks).
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.bounds.activations import table_errors
from nodecast.compiler.bounds.ranges import FLOAT64_UNIT, affine_ranges, gamma, matvec
from nodecast.compiler.fixedpoint import INTERPOLATION_ROUNDING, Z_FRAC, FixedPlan, real_values


class FixedProgram:
    """The real-valued view of a plan that :func:`box_bounds` needs (computed once)."""

    def __init__(self, plan: FixedPlan, net):
        bits = plan.word_bits
        frac = np.asarray(plan.input_frac)
        half = np.asarray(plan.input_half, dtype=np.float64)
        self.plan = plan
        self.centre = np.ldexp(np.asarray(plan.input_centre, dtype=np.float64), -frac)
        self.half = np.where(half > 0, np.ldexp(half, -frac), 1.0)
        ratio = np.abs(np.asarray(plan.input_recip, dtype=np.float64) * half
                       / 2.0 ** (plan.norm_shift + bits - 2) - 1.0)
        safe = np.where(half > 0, half, 1.0)
        self.t_error = np.where(half > 0, 0.5 / safe * (1 + ratio) + (1 + 1 / safe) * ratio
                                + 0.5 * 2.0**-plan.norm_frac, 0.0)
        self.weights = real_values(plan.hidden_weights, plan.hidden_frac)
        self.biases = real_values(plan.hidden_biases, plan.hidden_acc_frac)
        self.output_weights = real_values(plan.output_weights, np.asarray(plan.output_frac)[None, :])
        self.output_biases = real_values(plan.output_biases, np.asarray(plan.output_acc_frac))
        n = plan.hidden_weights.shape[1]
        # the float64 arithmetic that made the plan's real weights (at, bt) from the network's
        factor = 0.5 if net.activation == "logistic" else 1.0
        shift = np.abs(self.centre - net.input_offset) / self.half
        self.hidden_size = factor * np.abs(net.hidden_biases) + np.abs(plan.at) @ shift
        self.node_rounding = ((0.5 * n * 2.0**-plan.hidden_acc_frac if plan.hidden_pre_shift else 0.0)
                              + (0.5 * 2.0**-Z_FRAC if plan.hidden_acc_frac > Z_FRAC else 0.0))
        table = np.asarray(plan.table, dtype=np.float64) * 2.0 ** -(bits - 1)
        step = 2.0**-plan.table_step_bits
        self.table = table_errors(table, step)
        self.interpolation = (INTERPOLATION_ROUNDING * 2.0 ** -(bits - 1)
                              + step * 2.0 ** -(Z_FRAC - plan.table_step_bits))
        m = plan.hidden_weights.shape[0]
        acc_step = np.ldexp(1.0, -np.asarray(plan.output_acc_frac))
        result_step = np.ldexp(1.0, -np.asarray(plan.result_frac))
        shift = np.asarray(plan.output_acc_frac) - np.asarray(plan.result_frac)
        self.output_rounding = ((0.5 * m * acc_step if plan.output_pre_shift else 0.0)
                                + np.where(shift > 0, 0.5 * result_step, 0.0))
        self.top = (2 ** (bits - 1) - 1) * result_step
        # the plan's certified max |y| over the domain (none yet while the plan computes it); the
        # per-box enclosure of |y| is loose on large boxes, so saturation is judged against both
        self.y_ceiling = (np.asarray(plan.output_ceiling) if plan.output_ceiling
                          else np.full(plan.beta.shape[1], np.inf))


def box_bounds(program: FixedProgram, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """Upper bound of |artifact(round(x 2^f)) - model(x)| over each box, per output: (B, t).

    The normalised inputs' errors (rounding into Q(f), normalisation) are shared by every node, so
    they are charged through the model's gradient, enclosed over the box; each node's own errors
    are charged through |output weight| (see :mod:`nodecast.compiler.bounds.floating`, same split).
    """
    plan, low, high = program.plan, np.atleast_2d(low), np.atleast_2d(high)
    t_lo = (low - program.centre) / program.half
    t_hi = (high - program.centre) / program.half
    pad = 4 * FLOAT64_UNIT * (np.abs(t_lo) + np.abs(t_hi)) + program.t_error
    t_lo, t_hi = t_lo - pad, t_hi + pad  # where the computed inputs may lie
    z_lo, z_hi = affine_ranges(plan.at, plan.bt, t_lo, t_hi)
    d_lo, d_hi = affine_ranges(program.weights - plan.at, program.biases - plan.bt, t_lo, t_hi)
    t_abs = np.maximum(np.abs(t_lo), np.abs(t_hi))
    e_z = (np.maximum(np.abs(d_lo), np.abs(d_hi)) + program.node_rounding
           + gamma(plan.at.shape[1] + 4, FLOAT64_UNIT) * (matvec(t_abs, np.abs(plan.at))
                                                          + program.hidden_size))
    w_lo, w_hi = z_lo - e_z, z_hi + e_z
    abs_lo = np.where(w_lo > 0, w_lo, np.where(w_hi < 0, -w_hi, 0.0))
    abs_hi = np.maximum(np.abs(w_lo), np.abs(w_hi))
    slope = (1.0 - np.tanh(abs_lo) ** 2) * (1 + 1e-12)
    e_h = program.table.over(abs_lo, abs_hi) + program.interpolation + slope * e_z
    h_lo, h_hi = np.tanh(z_lo), np.tanh(z_hi)
    h_mid, h_rad = 0.5 * (h_lo + h_hi), 0.5 * (h_hi - h_lo)
    beta, stored = plan.beta.T, program.output_weights.T
    delta = stored - beta
    error = (matvec(e_h, np.abs(stored))
             + np.abs(matvec(h_mid, delta) + (program.output_biases - plan.ct))
             + matvec(h_rad, np.abs(delta)) + program.output_rounding)
    gradient = _gradient(plan, z_lo, z_hi, beta)  # (B, t, n)
    error = error + (gradient * program.t_error[None, None, :]).sum(axis=2)
    # the largest |y| over the box, for saturation: interval sum or mean-value form, the smaller
    centre, half = 0.5 * (t_lo + t_hi), 0.5 * (t_hi - t_lo)
    at_centre = np.abs(matvec(np.tanh(matvec(centre, plan.at) + plan.bt), beta) + plan.ct)
    y_abs = np.minimum(np.abs(matvec(h_mid, beta) + plan.ct) + matvec(h_rad, np.abs(beta)),
                       at_centre * (1 + 1e-12) + (gradient * half[:, None, :]).sum(axis=2))
    error = error + gamma(beta.shape[1] + 8, FLOAT64_UNIT) * (
        matvec(np.maximum(np.abs(h_lo), np.abs(h_hi)), np.abs(beta)) + np.abs(plan.ct))
    # saturation clips the result into [-top, top]: for |y| <= top that only brings it nearer y
    # (a projection onto an interval holding y); beyond, it adds at most |y| - top
    y_abs = np.minimum(y_abs, program.y_ceiling)
    return error + np.maximum(y_abs - program.top, 0.0)


def output_magnitude(program: FixedProgram, low: np.ndarray, high: np.ndarray) -> np.ndarray:
    """An upper bound of the model's |y| over each box (B, t): the smaller of the interval sum and
    the mean-value form around the box centre."""
    plan, low, high = program.plan, np.atleast_2d(low), np.atleast_2d(high)
    t_lo = (low - program.centre) / program.half - program.t_error
    t_hi = (high - program.centre) / program.half + program.t_error
    z_lo, z_hi = affine_ranges(plan.at, plan.bt, t_lo, t_hi)
    beta = plan.beta.T
    h_lo, h_hi = np.tanh(z_lo), np.tanh(z_hi)
    interval = (np.abs(matvec(0.5 * (h_lo + h_hi), beta) + plan.ct)
                + matvec(0.5 * (h_hi - h_lo), np.abs(beta)))
    centre, half = 0.5 * (t_lo + t_hi), 0.5 * (t_hi - t_lo)
    at_centre = np.abs(matvec(np.tanh(matvec(centre, plan.at) + plan.bt), beta) + plan.ct)
    mean_value = at_centre + (_gradient(plan, z_lo, z_hi, beta) * half[:, None, :]).sum(axis=2)
    slack = 1e-12 * (matvec(np.maximum(np.abs(h_lo), np.abs(h_hi)), np.abs(beta)) + np.abs(plan.ct))
    return np.minimum(interval, mean_value) + slack


def _gradient(plan: FixedPlan, z_lo, z_hi, beta) -> np.ndarray:
    """max |dy/dt_i| over each box, (B, t, n): dy/dt_i = sum_j beta_j tanh'(z_j) a_ji, with
    tanh' enclosed over each node's z interval (interval arithmetic)."""
    abs_lo = np.where(z_lo > 0, z_lo, np.where(z_hi < 0, -z_hi, 0.0))
    abs_hi = np.maximum(np.abs(z_lo), np.abs(z_hi))
    s_hi, s_lo = 1.0 - np.tanh(abs_lo) ** 2, 1.0 - np.tanh(abs_hi) ** 2
    s_mid, s_rad = 0.5 * (s_lo + s_hi), 0.5 * (s_hi - s_lo) * (1 + 1e-9) + 1e-15
    t, n = beta.shape[0], plan.at.shape[1]
    coupling = (beta[:, None, :] * plan.at.T[None, :, :]).reshape(t * n, -1)
    gradient = np.abs(matvec(s_mid, coupling)) + matvec(s_rad, np.abs(coupling))
    return gradient.reshape(-1, t, n) * (1 + 1e-9)


CEILING_BOXES = 8192


def certified_ceiling(plan: FixedPlan, net) -> np.ndarray:
    """A certified max of the model's |y| over the declared domain, per output (branch and bound
    on :func:`output_magnitude`)."""
    from nodecast.compiler.bounds.branch import refine

    program = FixedProgram(plan, net)
    impact = np.abs(net.hidden_weights / net.input_scale).sum(axis=0)
    with np.errstate(over="ignore", invalid="ignore"):
        return refine(lambda lo, hi: output_magnitude(program, lo, hi), net.domain_low,
                      net.domain_high, impact, CEILING_BOXES).bound

"""The export-error estimate of a fixed-point (q15, q31) artifact, whose formats come from
:func:`nodecast.compiler.passes.quantise.make_plan`. :func:`nodecast.compiler.typical_error.estimate`
sends "q15" and "q31" here.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.fixedpoint import (
    INTERPOLATION_ROUNDING,
    SCALES,
    Z_FRAC,
    FixedPlan,
    table_tanh,
)
from nodecast.compiler.ir import Network
from nodecast.compiler.typical_error.base import COVERAGE, ErrorEstimate

_TANH_CURVATURE = 0.7698  # max |tanh''| = 4 / (3 sqrt 3)
# The table's error summed over the nodes is heavier-tailed than a normal error: on four test models
# its maximum over 65,536 probes reached 5.8 times its root mean square (4.8 over 4,096 probes); on
# the q31 iris classifier of tests/compiler/test_c_accuracy.py 7.1 times over the estimate's own
# 2,064 probes and 6.8 times (against that RMS) over 4,300 fresh ones.
TABLE_COVERAGE = 8.0
_BLOCK = 256


def estimate(net: Network, precision: str, X: np.ndarray | None = None,
             activation_error: float = 0.0, table_size: int | None = None,
             scales: str = SCALES[0], plan: FixedPlan | None = None) -> ErrorEstimate:
    """Estimated max abs error (target units) of the fixed-point artifact of ``net`` on the domain.

    Per probe: the quantisation of weights and biases, known exactly and propagated signed (first
    order); the input's rounding (half a step of its Q format, plus the
    normalisation's) through the model's gradient; the roundings of each node's accumulator and
    interpolation as independent errors (root sum of squares times the coverage factor of
    :mod:`nodecast.compiler.typical_error.base`); second-order terms; the output's rounding and
    saturation.
    ``activation_error`` beyond the error of the table of ``table_size`` (an artifact with a coarser
    table) adds linearly as sum |weight| times the excess. The result is the maximum over the probes
    (default :func:`nodecast.compiler.domain_points.domain_probes`), clipped into the domain, since the
    artifact clamps or rejects anything outside it. ``worst_case`` is the same sum with every term
    taken in absolute value and the table's error at its maximum. The table's own error, also known
    exactly at each probe, varies with x like a random function (every node sits at its own place
    between two entries), so it adds as the larger of its maximum over the probes and
    ``TABLE_COVERAGE`` times its root mean square over them (capped by sum |weight| times the
    table's maximum error, which bounds it). ``plan``: the artifact's plan when the caller holds it
    (else one is made for ``table_size`` and ``scales``).
    """
    if net.n_categorical:
        raise NodecastError(f"{precision} artifacts do not take categorical inputs yet; choose "
                            "float32 or float64")
    if plan is None:
        from nodecast.compiler.passes.quantise import make_plan

        plan = make_plan(net, precision, table_size, scales)
    X = domain_probes(net) if X is None else np.asarray(X, dtype=np.float64)
    X = np.clip(X, net.domain_low, net.domain_high)
    excess = max(float(activation_error) - plan.table_error, 0.0)
    typical, worst = np.zeros(net.n_outputs), np.zeros(net.n_outputs)
    table_max, table_squares = np.zeros(net.n_outputs), np.zeros(net.n_outputs)
    for start in range(0, X.shape[0], _BLOCK):
        block = _block_errors(plan, X[start : start + _BLOCK], excess)
        typical, worst = np.maximum(typical, block[0]), np.maximum(worst, block[1])
        table_max = np.maximum(table_max, np.abs(block[2]).max(axis=0))
        table_squares += (block[2] ** 2).sum(axis=0)
    linear = np.abs(plan.beta).sum(axis=0) * plan.table_error
    spread = np.minimum(TABLE_COVERAGE * np.sqrt(table_squares / X.shape[0]), linear)
    table = np.maximum(table_max, spread)
    return ErrorEstimate(precision, tuple(float(v) for v in typical + table),
                         tuple(float(v) for v in worst), int(X.shape[0]))


def _input_errors(plan: FixedPlan, X: np.ndarray):
    """Normalised inputs t (rows, n) and the bound on each input's rounding in t units (n,)."""
    frac = np.asarray(plan.input_frac)
    centre = np.ldexp(np.asarray(plan.input_centre, dtype=np.float64), -frac)
    half = np.ldexp(np.asarray(plan.input_half, dtype=np.float64), -frac)
    safe = np.where(half > 0, half, 1.0)
    t = np.where(half > 0, (X - centre) / safe, 0.0)
    step = 2.0**-plan.norm_frac
    eps = (0.5 * np.ldexp(1.0, -frac) / safe + 0.5 * step
           + 0.5 * np.asarray(plan.input_half, dtype=np.float64) * step * 2.0**-plan.norm_shift)
    return t, np.where(half > 0, eps, 0.0)


def _block_errors(plan: FixedPlan, X: np.ndarray, excess_activation_error: float):
    t, eps_t = _input_errors(plan, X)
    A, B, Bo, C = plan.real_weights()
    z = t @ plan.at.T + plan.bt
    th, h = np.tanh(z), table_tanh(plan, z)
    slope = 1.0 - th * th
    dz_weights = t @ (A - plan.at).T + (B - plan.bt)
    eps_z = 2.0**-Z_FRAC + plan.node_rounding()  # (M,): the table position's truncation too
    eps_h = INTERPOLATION_ROUNDING * 2.0 ** -(plan.word_bits - 1)
    dz = np.abs(dz_weights) + np.abs(plan.at) @ eps_t + eps_z
    result_step = np.ldexp(1.0, -np.asarray(plan.result_frac))
    output_round = 0.5 * result_step + plan.output_rounding()
    top = (2 ** (plan.word_bits - 1) - 1) * result_step
    typical = np.zeros((X.shape[0], Bo.shape[1]))
    worst, table = np.zeros_like(typical), np.zeros_like(typical)
    for o in range(Bo.shape[1]):
        beta, dbeta = plan.beta[:, o], Bo[:, o] - plan.beta[:, o]
        y = th @ beta + plan.ct[o]
        table[:, o] = (h - th) @ beta
        signed = h @ dbeta + (C[o] - plan.ct[o]) + (slope * dz_weights) @ beta
        gradient = np.abs((slope * beta) @ plan.at) @ eps_t
        rounding = COVERAGE * np.sqrt(((slope * eps_z) ** 2 + eps_h**2) @ (beta * beta))
        second = (0.5 * _TANH_CURVATURE * dz * dz) @ np.abs(beta) + (slope * dz) @ np.abs(dbeta)
        common = (second + output_round[o] + np.maximum(np.abs(y) - top[o], 0.0)
                  + excess_activation_error * np.abs(Bo[:, o]).sum())
        typical[:, o] = np.abs(signed) + gradient + rounding + common
        worst[:, o] = ((slope * dz + plan.table_error) @ np.abs(beta) + np.abs(h) @ np.abs(dbeta)
                       + abs(C[o] - plan.ct[o]) + common)
    return typical.max(axis=0), worst.max(axis=0), table

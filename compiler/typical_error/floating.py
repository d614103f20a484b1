"""The typical export error in floating point: how far an artifact evaluated in a named precision
may stray from the float64 reference on the declared input domain, before anything is exported.

Model. Every floating-point operation rounds with a relative error of at most the unit roundoff u
(IEEE 754: float32 u = 2^-24 = eps/2, float64 u = 2^-53). For a probe x with normalised input u_i,
pre-activations z_j, activations h_j, output weights beta_j and terms t_j = beta_j h_j, the errors that
matter, in normalised output units, are

* term roundings: the stored weight, the activation value and the product, each about u |t_j|;
* summation: adding t_j to the running sum s_j rounds at about u |s_j|, so a sum whose partial sums
  grow large and cancel (an ill-conditioned output layer) loses accuracy even when its terms do not;
* the hidden layer: z_j is rounded at about u (|b_j| + sum_i |a_ji u_i|), and that error reaches the
  output through the activation slope, as |beta_j| g'(z_j) times it;
* the inputs themselves: below float64, each x_i is rounded to the artifact's precision when it is
  handed over, which moves z_j by about u sum_i |a_ji x_i| / scale_i (large for a domain that is
  narrow and far from zero, such as 1000..1001, whatever the graph does with it).

Independent roundings add like a random walk, so the estimate for one probe is the root sum of
squares of all those contributions, and the estimate reported is ``COVERAGE`` times its maximum over
deterministic probes spread through the domain (scrambled Sobol points and the box's corners); a
coverage of 4 is what a normal error's maximum over some 10^4 probes reaches. An activation
implementation's own absolute error (a libm-free approximation, a table) is systematic, so it adds
linearly as sum_j |beta_j| times that error. Results are scaled into target units.

This is an estimate, not a certificate: the bound each artifact states is certified by
:mod:`nodecast.compiler.bounds`.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.ir import Network
from nodecast.compiler.targets import UNIT_ROUNDOFF
from nodecast.compiler.typical_error.base import COVERAGE, ErrorEstimate

_TERM_ROUNDINGS = 3.0  # stored weight, activation value, product
_OUTPUT_ROUNDINGS = 2.0  # the folded output bias, the last addition
_BLOCK = 512



def estimate(net: Network, precision: str, X: np.ndarray | None = None,
             activation_error: float = 0.0) -> ErrorEstimate:
    """Estimate the export error of ``net`` evaluated in ``precision`` ("float32" or "float64";
    fixed point: :mod:`nodecast.compiler.typical_error.fixed`)."""
    if precision not in UNIT_ROUNDOFF:
        raise ValueError(f"no floating-point estimate for precision {precision!r}; "
                         f"choose one of {sorted(UNIT_ROUNDOFF)}")
    unit = UNIT_ROUNDOFF[precision]
    X = domain_probes(net) if X is None else np.asarray(X, dtype=np.float64)
    m, n = net.n_nodes, net.n_features
    typical = np.zeros(net.n_outputs)
    worst = np.zeros(net.n_outputs)
    for start in range(0, X.shape[0], _BLOCK):
        block_typical, block_worst = _block_terms(net, X[start : start + _BLOCK],
                                                  rounds_inputs=precision != "float64")
        typical = np.maximum(typical, block_typical)
        worst = np.maximum(worst, block_worst)
    systematic = activation_error * np.abs(net.output_weights).sum(axis=0)
    per_output = (COVERAGE * unit * typical + systematic) * net.output_scale
    # the output itself, in target units: the folded bias (offset-sized) and the final sum round
    # at the size of y, however small the terms; a target far from zero makes this dominate
    output_rounding = _OUTPUT_ROUNDINGS * unit * _max_abs_output(net, X)
    per_output = per_output + output_rounding
    gamma = lambda k: k * unit / (1.0 - k * unit)  # noqa: E731
    n += net.n_categorical
    bound = ((gamma(m + 4) * worst[0] + gamma(n + 3) * worst[1] + systematic) * net.output_scale
             + output_rounding)
    return ErrorEstimate(precision, tuple(float(v) for v in per_output),
                         tuple(float(v) for v in bound), int(X.shape[0]))


def _max_abs_output(net: Network, X: np.ndarray) -> np.ndarray:
    from nodecast.compiler.reference import predict

    return np.max(np.abs(predict(net, X)), axis=0)


def _block_terms(net: Network, X: np.ndarray, rounds_inputs: bool):
    """Per output: max over the block of the root-sum-square rounding size (in units of u), and of
    the two worst-case sums (terms, pre-activations) that gamma_k multiplies."""
    from nodecast.compiler.reference import hidden_layer, level_contribution

    act = get_activation(net.activation)
    numbers = X[:, : net.n_features]
    U = (numbers - net.input_offset) / net.input_scale
    Z = hidden_layer(net, X)
    H, slope = act.function(Z), act.derivative(Z)
    z_size = np.abs(U) @ np.abs(net.hidden_weights).T + np.abs(net.hidden_biases)
    if net.n_categorical:  # each level vector is one more addend of the pre-activation sum
        z_size += np.abs(level_contribution(net, X))
    if rounds_inputs:
        z_size += np.abs(numbers / net.input_scale) @ np.abs(net.hidden_weights).T
    typical = np.zeros((X.shape[0], net.n_outputs))
    worst_terms = np.zeros_like(typical)
    worst_hidden = np.zeros_like(typical)
    for o in range(net.n_outputs):
        beta = net.output_weights[:, o]
        terms = H * beta
        partial = np.cumsum(terms, axis=1) + net.output_bias[o]
        hidden = np.abs(beta) * slope * z_size
        typical[:, o] = np.sqrt(_TERM_ROUNDINGS * np.sum(terms**2, axis=1)
                                + np.sum(partial**2, axis=1) + np.sum(hidden**2, axis=1))
        worst_terms[:, o] = np.abs(terms).sum(axis=1) + abs(net.output_bias[o])
        worst_hidden[:, o] = (act.slope_at_inflection * np.abs(beta) * z_size).sum(axis=1)
    return typical.max(axis=0), (worst_terms.max(axis=0), worst_hidden.max(axis=0))

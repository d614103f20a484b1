"""Folding the input and output scaling into the weights.

Input folding replaces u = (x - offset) / scale followed by z = A u + b with z = A' x + b', where
A' = A / scale (per column) and b' = b - A' offset. It is exact in real arithmetic but, in a short
precision, rounding of z now happens at the size of |A' x| + |b'| instead of |A u| + |b| plus the
rounding of the inputs themselves (|A' x|, paid either way when inputs arrive in that precision): a
domain far from zero and narrow (say 1000..1001) makes the folded terms large and cancelling.
``input_fold_growth`` measures the ratio of those two sizes (the pre-activation term of the error
estimate) on deterministic probes of the domain; back-ends fold when it stays within
``FOLD_GROWTH_LIMIT`` and keep explicit scaling nodes otherwise. Output folding (B' = B * scale,
c' = c * scale + offset) never costs more than the final rounding of y, so it is always applied.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.ir import Network

FOLD_GROWTH_LIMIT = 1.5


def folded_input_layer(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Hidden weights (M, n) and biases (M,) acting on raw inputs."""
    weights = net.hidden_weights / net.input_scale
    return weights, net.hidden_biases - weights @ net.input_offset


def folded_output_layer(net: Network) -> tuple[np.ndarray, np.ndarray]:
    """Output weights (M, t) and bias (t,) producing outputs in target units."""
    return net.output_weights * net.output_scale, net.output_bias * net.output_scale + net.output_offset


def input_fold_growth(net: Network) -> float:
    """Largest ratio, over nodes and probes, of the folded to the unfolded pre-activation size."""
    X = domain_probes(net, count=256)[:, : net.n_features]  # level vectors are not folded
    U = (X - net.input_offset) / net.input_scale
    weights, biases = folded_input_layer(net)
    input_rounding = np.abs(X) @ np.abs(weights).T
    unfolded = np.abs(U) @ np.abs(net.hidden_weights).T + np.abs(net.hidden_biases) + input_rounding
    folded = input_rounding + np.abs(biases)
    return float(np.max(folded / np.maximum(unfolded, np.finfo(float).tiny)))


def should_fold_inputs(net: Network) -> bool:
    return input_fold_growth(net) <= FOLD_GROWTH_LIMIT

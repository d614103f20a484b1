"""Re-solve the output layer of a network on data, keeping its hidden layer (after shrinking).

A trainer step: least squares on the given rows with the trainer's solver (blocked QR, the output
bias fitted and not penalised), in the network's normalised target coordinates. It changes what the
model computes, so no shrinking bound covers it; its effect is measured on the rows instead.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.ir import Network
from nodecast.compiler.reference import hidden_layer
from nodecast.trainer.solvers import accumulate, solve


def refit_output_layer(net: Network, X: np.ndarray, Y: np.ndarray, ridge: float) -> Network:
    """``net`` with output weights and bias re-solved on rows ``X`` (N, n), targets ``Y`` (N, t)
    in target units (classifiers: one-hot scores)."""
    X = np.asarray(X, dtype=np.float64)
    Y = np.asarray(Y, dtype=np.float64).reshape(X.shape[0], -1)
    H = get_activation(net.activation).function(hidden_layer(net, X))
    V = (Y - net.output_offset) / net.output_scale
    beta, bias = solve(accumulate([(H, V)]), ridge)
    return net.replace(output_weights=beta, output_bias=bias)


def rmse(net: Network, X: np.ndarray, Y: np.ndarray) -> list[float]:
    """Root mean square error per output of ``net`` on rows ``X`` against ``Y``."""
    from nodecast.compiler.reference import predict

    residual = predict(net, X) - np.asarray(Y, dtype=np.float64).reshape(X.shape[0], -1)
    return [float(v) for v in np.sqrt(np.mean(residual**2, axis=0))]

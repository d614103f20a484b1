"""Logistic nodes as tanh nodes: logistic(z) = 1/2 + tanh(z / 2) / 2, folded into the weights.

The hidden weights, biases and level vectors are halved (exact in binary floating point: a power of
two), the output weights halved likewise, and the constant halves go into the output bias:
sum_j beta_j (1/2 + t_j / 2) = sum_j beta_j / 2 + sum_j (beta_j / 2) t_j, the new bias summed
exactly rounded (``math.fsum``). The result is a tanh network computing the same function; a
back-end that lowers through it needs one tanh per node and no exp, so no finite input overflows.
A tanh network passes through unchanged.

The Python predictor and its bound program lower through it. The fixed-point plan halves its real
weights the same way in its own arithmetic (moving it onto this pass could flip a rounded integer
of the per-layer scheme, which is kept bit for bit); the C float template evaluates
1/2 + tanh(z/2)/2 at run time and ONNX keeps its own Sigmoid operator. Each choice is described to
the error bound in :mod:`nodecast.compiler.bounds.programs`.
"""

from __future__ import annotations

import math

import numpy as np

from nodecast.compiler.ir import Network


def logistic_as_tanh(net: Network) -> Network:
    """The tanh network equal to ``net`` (``net`` itself when it is a tanh network already)."""
    if net.activation != "logistic":
        return net
    output_weights = net.output_weights * 0.5
    bias = np.array([math.fsum([c, *column]) for c, column in
                     zip(net.output_bias.tolist(), output_weights.T.tolist(), strict=True)])
    changes = {"activation": "tanh", "hidden_weights": net.hidden_weights * 0.5,
               "hidden_biases": net.hidden_biases * 0.5, "output_weights": output_weights,
               "output_bias": bias}
    if net.n_categorical:
        changes["level_weights"] = net.level_weights * 0.5
    return net.replace(**changes)

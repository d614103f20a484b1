"""The logistic-as-tanh pass (compiler/passes/half_tanh.py): the lowered tanh network computes the
same function. logistic(z) = 1/2 + tanh(z/2)/2 is an identity of the functions (common practice;
it follows from tanh(x) = 2 logistic(2x) - 1)."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.passes.half_tanh import logistic_as_tanh
from nodecast.compiler.reference import predict


def test_a_tanh_network_passes_through(friedman_bundle):
    net = friedman_bundle.network.replace(activation="tanh")
    assert logistic_as_tanh(net) is net


def test_the_lowered_network_computes_the_same_outputs_with_levels_and_two_outputs(demo_bundle):
    rng = np.random.default_rng(3)
    net = demo_bundle.network
    net = net.replace(output_weights=np.column_stack([net.output_weights[:, 0],
                                                      -0.5 * net.output_weights[:, 0]]),
                      output_bias=np.array([0.1, -0.2]), output_offset=np.array([1.0, 2.0]),
                      output_scale=np.array([2.0, 3.0]), target_names=("a", "b"),
                      target_units=("", ""), categorical_names=("mode",),
                      categorical_levels=(("x", "y", "z"),),
                      level_weights=rng.normal(size=(3, net.n_nodes)))
    lowered = logistic_as_tanh(net)
    assert lowered.activation == "tanh"
    # exact halvings: a power of two changes the exponent only
    assert np.array_equal(lowered.hidden_weights * 2, net.hidden_weights)
    assert np.array_equal(lowered.level_weights * 2, net.level_weights)
    X = np.column_stack([net.domain_low + rng.random((500, net.n_features))
                         * (net.domain_high - net.domain_low), rng.integers(0, 3, 500)])
    assert np.max(np.abs(predict(lowered, X) - predict(net, X))) < 1e-12

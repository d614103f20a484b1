"""Certified shrinking: planted constant and duplicate nodes are all removed, the measured error
against the source model (verify probes and an adversarial search) never exceeds the stated bound,
the bound stays within the budget, and the CLI records what it did."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from nodecast.cli import cli
from nodecast.compiler import load, reference, save
from nodecast.compiler.bounds.search import find_worst
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.compiler.passes.shrink import shrink, shrink_bundle
from nodecast.compiler.verify.probes import probe_families

CONSTANT, DUPLICATE, NEGATED = 3, 3, 2


def _planted(net: Network, seed: int = 0):
    """``net`` plus nodes that are constant over the domain (tiny weights, bias +-25: the logistic
    or tanh slope there is below 1e-10), exact duplicates sharing an original node's output weight,
    and negated duplicates (z -> -z) with their own output weight. Returns the network and the
    indices of the planted nodes."""
    rng = np.random.default_rng(seed)
    m, n = net.n_nodes, net.n_features
    A, b, beta = [net.hidden_weights], [net.hidden_biases], [net.output_weights.copy()]
    A.append(rng.normal(size=(CONSTANT, n)) * 1e-3)
    b.append(np.array([25.0, -25.0, 25.0])[:CONSTANT])
    beta.append(rng.normal(size=(CONSTANT, net.n_outputs)))
    twins = rng.choice(m, DUPLICATE + NEGATED, replace=False)
    A.append(net.hidden_weights[twins[:DUPLICATE]])
    b.append(net.hidden_biases[twins[:DUPLICATE]])
    beta.append(0.5 * beta[0][twins[:DUPLICATE]])
    beta[0][twins[:DUPLICATE]] *= 0.5
    A.append(-net.hidden_weights[twins[DUPLICATE:]])
    b.append(-net.hidden_biases[twins[DUPLICATE:]])
    beta.append(rng.normal(size=(NEGATED, net.n_outputs)))
    planted = net.replace(hidden_weights=np.vstack(A), hidden_biases=np.concatenate(b),
                          output_weights=np.vstack(beta))
    return planted, set(range(m, planted.n_nodes))


def _float64_noise(net: Network) -> float:
    """What float64 evaluation of the reference may round away: 2^-40 of the sum of the output
    terms' sizes (the bound is for exact arithmetic; the measurement is in float64)."""
    return 2.0**-40 * float(np.max(np.abs(net.output_weights).sum(axis=0) * net.output_scale
                                   + np.abs(net.output_bias * net.output_scale)
                                   + np.abs(net.output_offset)))


def _measured(source: Network, small: Network, seed: int = 0) -> float:
    """The largest |small - source| found on the verify probes and by the adversarial search."""
    X = np.vstack([f.X for f in probe_families(source, None, 2048, seed) if f.inside_domain])
    on_probes = np.max(np.abs(reference.predict(small, X) - reference.predict(source, X)))
    worst = find_worst(lambda Z: np.abs(reference.predict(small, Z) - reference.predict(source, Z)),
                       source.domain_low, source.domain_high, seed=seed, random_points=4000)
    return float(max(on_probes, worst.values.max()))


def _random_net(activation: str, m: int = 40, n: int = 3, seed: int = 1) -> Network:
    """A network with moderate output weights, so a budget removes many nodes by every action."""
    rng = np.random.default_rng(seed)
    return Network(hidden_weights=rng.normal(size=(m, n)) * 4.0,
                   hidden_biases=rng.normal(size=m) * 3.0, activation=activation,
                   output_weights=rng.normal(size=(m, 2)) * 0.05, output_bias=np.zeros(2),
                   input_offset=np.zeros(n), input_scale=np.ones(n) * 2.0,
                   output_offset=np.array([1.0, -3.0]), output_scale=np.array([2.0, 0.5]),
                   domain_low=np.zeros(n), domain_high=np.ones(n) * 2.0,
                   feature_names=[f"x{i}" for i in range(n)], target_names=["a", "b"])


@pytest.mark.parametrize("activation", ["logistic", "tanh"])
def test_every_planted_node_is_removed_within_the_budget(friedman_bundle, activation):
    base = friedman_bundle.network.replace(activation=activation)
    planted, extra = _planted(base)
    budget = 1e-6
    result = shrink(planted, budget)
    removed = {r.node for r in result.removals}
    assert extra <= removed
    assert result.network.n_nodes <= base.n_nodes
    assert max(result.error_bound) <= budget
    assert _measured(planted, result.network) <= max(result.error_bound) + _float64_noise(planted)


@pytest.mark.parametrize("activation", ["logistic", "tanh"])
def test_the_bound_holds_against_probes_and_search_when_many_nodes_go(activation):
    net = _random_net(activation)
    budget = 0.05
    result = shrink(net, budget)
    counts = result.counts()
    assert counts["fold"] > 0 and result.network.n_nodes < net.n_nodes - 5
    bound = np.array(result.error_bound)
    assert np.all(bound <= budget)
    X = np.vstack([f.X for f in probe_families(net, None, 2048, 0) if f.inside_domain])
    error = np.abs(reference.predict(result.network, X) - reference.predict(net, X)).max(axis=0)
    worst = find_worst(lambda Z: np.abs(reference.predict(result.network, Z)
                                        - reference.predict(net, Z)),
                       net.domain_low, net.domain_high, seed=3, random_points=4000).values
    assert np.all(np.maximum(error, worst) <= bound)
    assert np.max(np.maximum(error, worst) / bound) > 0.05  # the bound is not vacuous either


def test_merging_a_negated_duplicate_moves_its_weight_and_the_bias():
    """tanh(-z) = -tanh(z) and logistic(-z) = 1 - logistic(z) (identities of the functions)."""
    for activation in ("tanh", "logistic"):
        net = _random_net(activation, m=5)
        A = np.vstack([net.hidden_weights, -net.hidden_weights[2]])
        b = np.append(net.hidden_biases, -net.hidden_biases[2])
        beta = np.vstack([net.output_weights, [[0.7, -0.2]]])
        twin = net.replace(hidden_weights=A, hidden_biases=b, output_weights=beta)
        result = shrink(twin, 1e-9, actions=("merge",))
        assert [(r.node, r.into, r.sign) for r in result.removals] == [(5, 2, -1)]
        X = np.random.default_rng(0).random((200, 3)) * 2.0
        assert np.allclose(reference.predict(result.network, X), reference.predict(twin, X),
                           rtol=0, atol=1e-12)


def test_a_zero_budget_removes_nothing_that_changes_outputs_and_bad_budgets_are_refused():
    net = _random_net("tanh")
    assert shrink(net, 0.0).network.n_nodes == net.n_nodes
    for bad in (-1.0, float("nan"), float("inf")):
        with pytest.raises(NodecastError, match="budget"):
            shrink(net, bad)
    with pytest.raises(NodecastError, match="actions"):
        shrink(net, 0.1, actions=("prune",))


def test_shrink_cli_records_what_it_did_and_inspect_lists_planted_nodes(friedman_bundle, tmp_path):
    planted, extra = _planted(friedman_bundle.network)
    source = tmp_path / "planted.ncast"
    save(Bundle(planted, {"metrics": {"validation": {"rmse": [1.0]}}}), source)
    runner = CliRunner()
    shown = runner.invoke(cli, ["inspect", str(source), "--json"])
    description = json.loads(shown.output)
    assert set(description["saturated_node_indices"]) >= set(range(200, 200 + CONSTANT))
    pairs = {(p["node"], p["sign"]) for p in description["duplicate_nodes"]}
    assert {j for j, _ in pairs} >= extra - set(range(200, 200 + CONSTANT))
    assert sum(s == -1 for _, s in pairs) >= NEGATED
    assert "near-duplicate node pairs" in runner.invoke(cli, ["inspect", str(source)]).output
    small = tmp_path / "small.ncast"
    result = runner.invoke(cli, ["shrink", str(source), "--max-error", "1e-6", "-o", str(small)])
    assert result.exit_code == 0, result.output
    record = load(small).metadata["shrink"]
    assert record["nodes_before"] == planted.n_nodes
    assert record["nodes_after"] == planted.n_nodes - len(record["removals"])
    assert {r["node"] for r in record["removals"]} >= extra
    assert max(record["error_bound"]) <= 1e-6 and record["source_metrics"]["validation"]
    again = runner.invoke(cli, ["shrink", str(source), "--max-error", "-1", "-o", str(small),
                                "--overwrite"])
    assert again.exit_code == 2 and "Traceback" not in again.output


def test_shrink_bundle_keeps_the_training_ranges_of_the_remaining_nodes(friedman_bundle):
    planted, _ = _planted(friedman_bundle.network)
    lows = list(np.arange(planted.n_nodes, dtype=float))
    metadata = {"node_ranges": {"training_z_low": lows, "training_z_high": lows}}
    bundle, result = shrink_bundle(Bundle(planted, metadata), 1e-6)
    assert bundle.metadata["node_ranges"]["training_z_low"] == [float(j) for j in result.kept]


def test_data_re_solves_the_output_layer_and_reports_it(tmp_path):
    """Re-solving on the rows after shrinking cannot do worse on them than the shrunk layer
    (least squares; Friedman #1 data from sklearn.datasets.make_friedman1, Friedman 1991)."""
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(600, n_features=5, noise=0.5, random_state=2)
    model = RandomNodeRegressor(n_nodes=60, ridge=1e-3, random_state=2).fit(X, y)
    source = tmp_path / "m.ncast"
    save(to_bundle(model, feature_names=[f"x{i}" for i in range(5)], target_names=["y"]), source)
    data = tmp_path / "rows.csv"
    data.write_text("x0,x1,x2,x3,x4,y\n" + "".join(
        ",".join(repr(float(v)) for v in (*row, t)) + "\n" for row, t in zip(X, y, strict=True)))
    out = tmp_path / "small.ncast"
    result = CliRunner().invoke(cli, ["shrink", str(source), "--max-error", "0.3", "--data",
                                      str(data), "-o", str(out)])
    assert result.exit_code == 0, result.output
    refit = load(out).metadata["refit"]
    assert refit["rows"] == 600
    assert refit["rmse_after"][0] <= refit["rmse_before"][0] * (1 + 1e-9)

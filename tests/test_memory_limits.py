"""Oversized work is refused before anything large is allocated, in one line with the estimate
(docs/reliability.md, "Resource limits"). The available memory is fixed at 2 GiB in these tests so
that the outcome does not depend on the machine."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import limits
from nodecast.compiler.bundle import Bundle, save
from nodecast.compiler.ir import Network
from tests.helpers import run_cli


def network(n_nodes, n_features) -> Network:
    rng = np.random.default_rng(0)
    return Network(hidden_weights=rng.normal(size=(n_nodes, n_features)) * 0.1,
                   hidden_biases=np.zeros(n_nodes), activation="tanh",
                   output_weights=rng.normal(size=(n_nodes, 1)) * 1e-3, output_bias=[0.0],
                   input_offset=np.zeros(n_features), input_scale=np.ones(n_features),
                   output_offset=[0.0], output_scale=[1.0], domain_low=-np.ones(n_features),
                   domain_high=np.ones(n_features),
                   feature_names=tuple(f"x{i}" for i in range(n_features)), target_names=("y",))


@pytest.fixture()
def two_gib(monkeypatch):
    monkeypatch.setattr(limits, "available_memory_bytes", lambda: 2 * 2**30)


@pytest.fixture(scope="module")
def million_nodes(tmp_path_factory):
    path = tmp_path_factory.mktemp("big") / "big.ncast"
    save(Bundle(network(10**6, 2), {}), path)
    return path


def _refused(code, err, *words) -> bool:
    return (code == 2 and err.count("\n") == 1 and err.startswith("nodecast: error: ")
            and all(word in err for word in words))


def test_emit_of_a_million_node_model_is_refused_before_rendering(million_nodes, tmp_path,
                                                                  capsys, monkeypatch, two_gib):
    from nodecast.compiler import backends

    monkeypatch.setattr(backends, "render", lambda *a, **k: pytest.fail("rendered"))
    code, _, err = run_cli(capsys, *["emit", million_nodes, "--to", "python", "-o", tmp_path / "p.py"])
    assert _refused(code, err, "would be at least", "4000001 parameters", "--max-artifact-size")
    code, _, err = run_cli(capsys, *["emit", million_nodes, "--to", "onnx", "--max-artifact-size", "1G",
                            "-o", tmp_path / "m.onnx"])
    assert _refused(code, err, "GiB of memory", "2 GiB available")
    assert list(tmp_path.iterdir()) == []


def test_inspect_of_a_million_node_model(million_nodes, capsys, two_gib):
    code, out, _ = run_cli(capsys, *["inspect", million_nodes])
    assert code == 0 and "1000000 tanh nodes" in out
    code, _, err = run_cli(capsys, *["inspect", million_nodes, "--precision", "q15"])
    assert _refused(code, err, "error estimate of 1000000 nodes", "GiB of memory")


@pytest.mark.slow
def test_verify_with_too_many_probes_or_features_is_refused_up_front(tmp_path, capsys, two_gib,
                                                                     monkeypatch):
    from nodecast.compiler.verify import probes

    save(Bundle(network(50, 3), {}), tmp_path / "m.ncast")
    code, _, _ = run_cli(capsys, *["emit", tmp_path / "m.ncast", "--to", "onnx", "-o", tmp_path / "m.onnx"])
    assert code == 0
    monkeypatch.setattr(probes, "sobol", lambda *a: pytest.fail("allocated the probes"))
    code, _, err = run_cli(capsys, *["verify", tmp_path / "m.ncast", tmp_path / "m.onnx", "--probes",
                            "100000000"])
    assert _refused(code, err, "on 100000034 probe rows", "lower --probes")
    save(Bundle(network(20, 20_000), {}), tmp_path / "wide.ncast")
    code, _, _ = run_cli(capsys, *["emit", tmp_path / "wide.ncast", "--to", "onnx", "-o",
                          tmp_path / "wide.onnx"])
    assert code == 0
    code, _, err = run_cli(capsys, *["verify", tmp_path / "wide.ncast", tmp_path / "wide.onnx"])
    assert _refused(code, err, "20000 features", "GiB of memory")


def test_the_estimates_scale_as_the_work_does():
    small, wide = network(100, 4), network(100, 400)
    assert limits.verify_bytes(small, 10_000) < limits.verify_bytes(small, 1_000_000)
    # near-bound and outside probes are 8 n rows of n features: quadratic in the features
    rows = lambda net: 4096 + 1024 + 8 * net.n_features + 2  # noqa: E731
    assert limits.verify_bytes(wide, rows(wide)) > 10 * limits.verify_bytes(small, rows(small))

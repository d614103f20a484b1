"""Regression tests for defects found in review: each asserts the behaviour that was wrong."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

from nodecast.compiler import NodecastError, emit, reference
from nodecast.compiler.domain_points import domain_probes
from tests.helpers import write_csv


def _nodecast(*args, cwd):
    return subprocess.run([sys.executable, "-m", "nodecast.cli", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=300)



def test_float32_estimate_covers_a_target_far_from_zero(tmp_path):
    import onnxruntime as ort  # reference runtime for the ONNX standard

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    rng = np.random.default_rng(0)
    X = rng.random((1500, 2))
    y = 1e6 + np.sin(3 * X[:, 0]) + X[:, 1]
    bundle = to_bundle(RandomNodeRegressor(n_nodes=80, random_state=0).fit(X, y))
    artifact = emit(bundle, "onnx", precision="float32")
    P = domain_probes(bundle.network, count=4096, seed=1)
    session = ort.InferenceSession(artifact.files["model.onnx"], providers=["CPUExecutionProvider"])
    (got,) = session.run(None, {"features": P.astype(np.float32)})
    error = np.max(np.abs(got - reference.predict(bundle.network, P)))
    # IEEE 754 single: y near 1e6 is held to 2^-24 * 1e6 = 0.06 whatever the graph does
    assert 0.0 < error <= artifact.summary["estimate"]["max_abs_error"]


def test_unboundable_fixed_point_export_is_refused(friedman_bundle):
    net = friedman_bundle.network
    # since the IR's content limits (docs/reliability.md), such a network cannot even be built
    with pytest.raises(NodecastError, match="cannot|fit|bounded|beyond"):
        huge = friedman_bundle.__class__(net.replace(hidden_weights=net.hidden_weights * 1e300),
                                         friedman_bundle.metadata)
        emit(huge, "c", precision="q15", out_of_domain="clamp")


def test_percent_in_a_feature_name_keeps_predictor_help_working(tmp_path):
    rows = np.random.default_rng(1).random((40, 3))
    write_csv(tmp_path / "d.csv", ["a", "%(prog)s %d", "y"], rows)
    for args in (["train", "d.csv", "--target", "y", "--nodes", "6", "-o", "m.ncz"],
                 ["emit", "m.ncz", "--to", "python", "-o", "p.py"]):
        assert _nodecast(*args, cwd=tmp_path).returncode == 0
    result = subprocess.run([sys.executable, "-I", "-S", "p.py", "--help"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and "%(prog)s %d" in result.stdout


def test_a_target_cannot_also_be_a_feature(tmp_path):
    write_csv(tmp_path / "d.csv", ["a", "y"], np.random.default_rng(2).random((30, 2)))
    result = _nodecast("train", "d.csv", "--target", "y", "--features", "a,y", "-o", "m.ncz",
                       cwd=tmp_path)
    assert result.returncode == 2 and "both a feature and a target" in result.stderr


def test_demo_into_an_impossible_folder_is_a_one_line_error(tmp_path):
    (tmp_path / "file").write_text("x")
    result = _nodecast("demo", "-o", str(tmp_path / "file" / "sub"), cwd=tmp_path)
    assert result.returncode == 2 and "Traceback" not in result.stderr


def test_emulate_is_refused_for_artifacts_that_are_not_c(friedman_bundle, tmp_path):
    from nodecast.compiler.verify import verify

    emit(friedman_bundle, "onnx", tmp_path / "m.onnx")
    with pytest.raises(NodecastError, match="emulate"):
        verify(friedman_bundle, tmp_path / "m.onnx", emulate="cortex-m4")

"""End-to-end acceptance of the walking skeleton: bundle, data-driven nodes, CLI, demo."""

from __future__ import annotations

import json
import subprocess
import sys
import zipfile

import numpy as np
import pytest

from nodecast.compiler import bundle as bundle_io
from nodecast.compiler.activations import get_activation


def _nodecast(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "nodecast.cli", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=300)


def test_bundle_round_trip_is_bit_exact(friedman_bundle, tmp_path):
    path = bundle_io.save(friedman_bundle, tmp_path / "m.ncast")
    loaded = bundle_io.load(path)
    for name, array in friedman_bundle.network.arrays().items():
        assert loaded.network.arrays()[name].tobytes() == array.tobytes(), name
    assert loaded.bundle_id == friedman_bundle.bundle_id
    assert loaded.metadata == json.loads(json.dumps(friedman_bundle.metadata))
    manifest = json.loads(zipfile.ZipFile(path).read("manifest.json"))
    assert manifest["bundle_id"] == friedman_bundle.bundle_id
    assert bundle_io.to_bytes(loaded) == path.read_bytes()  # same bundle, same bytes


def test_corrupted_bundle_is_refused_with_exit_2(friedman_bundle, tmp_path):
    data = bytearray(bundle_io.to_bytes(friedman_bundle))
    import io

    info = zipfile.ZipFile(io.BytesIO(bytes(data))).getinfo("arrays/hidden_weights.npy")
    # zip local header: 30 fixed bytes, the name, no extra field (APPNOTE 4.3.7); then the .npy
    # header (128 bytes here) and the float64 payload
    offset = info.header_offset + 30 + len(info.filename) + 128 + 8
    data[offset] ^= 0x01
    bad = tmp_path / "bad.ncast"
    bad.write_bytes(bytes(data))
    result = _nodecast("inspect", str(bad))
    assert result.returncode == 2
    assert "hidden_weights" in result.stderr and "Traceback" not in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def _nodes_at_training_points(U, weights, biases):
    """For each node, the training row where its pre-activation is zero (its anchor)."""
    Z = U @ weights.T + biases
    return np.argmin(np.abs(Z), axis=0), np.min(np.abs(Z), axis=0)


def test_data_driven_node_has_inflection_and_local_slope_at_its_anchor():
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark
    from sklearn.neighbors import NearestNeighbors

    from nodecast.trainer import RandomNodeRegressor

    X, y = make_friedman1(400, n_features=5, noise=0.5, random_state=1)
    k = 15
    model = RandomNodeRegressor(n_nodes=40, n_neighbors=k, slope_scale=1.0, random_state=2).fit(X, y)
    U = (X - model.input_offset_) / model.input_scale_
    T = (y - model.output_offset_[0]) / model.output_scale_[0]
    anchors, residual = _nodes_at_training_points(U, model.hidden_weights_, model.hidden_biases_)
    assert np.all(residual < 1e-12)  # the logistic's inflection (z = 0, g = 1/2) sits at a data point
    g = get_activation("logistic")
    assert np.allclose(g.function(np.zeros(1)), 0.5)
    _, neighbours = NearestNeighbors(n_neighbors=k).fit(U).kneighbors(U[anchors])
    from sklearn.linear_model import Ridge

    from nodecast.trainer.generators.data_driven import LOCAL_RIDGE

    def ridge(inputs, targets):
        alpha = LOCAL_RIDGE * np.linalg.norm(inputs - inputs.mean(axis=0), 2) ** 2
        return Ridge(alpha=alpha, solver="svd").fit(inputs, targets).coef_

    trend = ridge(U, T)  # the global linear trend the local fits shrink towards
    for node, rows in enumerate(neighbours):
        # the local fit is a ridge fit scaled to the neighbourhood (docs/training.md), here by
        # scikit-learn's Ridge; the gradient of g(a.u + b) at the anchor is g'(0) a = a / 4
        slope = trend + ridge(U[rows], T[rows] - U[rows] @ trend)
        assert np.allclose(model.hidden_weights_[node] / 4.0, slope, rtol=1e-8, atol=1e-10)


def test_help_imports_no_heavy_library():
    code = ("import sys\nfrom nodecast.cli import main\n"
            "for args in (['--help'], ['train', '--help'], ['emit', '--help'], ['verify', '--help'],"
            " ['predict', '--help'], ['inspect', '--help'], ['demo', '--help']):\n"
            "    try:\n        main(args)\n    except SystemExit:\n        pass\n"
            "heavy = [m for m in ('sklearn', 'onnx', 'onnxruntime', 'scipy', 'matplotlib')"
            " if m in sys.modules]\n"
            "print('HEAVY', heavy)\n")
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stderr
    assert "HEAVY []" in result.stdout


def test_version_flag():
    from nodecast.compiler.version import __version__

    result = _nodecast("--version")
    assert result.returncode == 0 and __version__ in result.stdout


@pytest.mark.slow
def test_demo_passes_and_beats_fixed_interval_baseline(tmp_path):
    result = _nodecast("demo", "-o", str(tmp_path / "demo"))
    assert result.returncode == 0, result.stdout + result.stderr
    line = next(text for text in result.stdout.splitlines() if text.startswith("trained"))
    ours, baseline = (float(v) for v in
                      [line.split("held-out RMSE ")[1].split()[0], line.split("same size ")[1].split()[0]])
    assert ours < baseline
    report = json.loads((tmp_path / "demo" / "verify_onnx.json").read_text())
    assert report["passed"] is True and report["max_abs_error"] <= max(report["tolerance"]["per_output"])
    assert (tmp_path / "demo" / "fan.ncast").stat().st_size > 0


@pytest.mark.parametrize("args, needle", [
    (["train", "missing.csv", "--target", "y", "-o", "m.ncast"], "cannot read"),
    (["inspect", "missing.ncast"], "cannot read bundle"),
    (["emit", "missing.ncast", "--to", "onnx", "-o", "m.onnx"], "cannot read bundle"),
])
@pytest.mark.slow
def test_bad_input_is_one_line_and_exit_2(tmp_path, args, needle):
    result = _nodecast(*args, cwd=tmp_path)
    assert result.returncode == 2
    assert needle in result.stderr and "Traceback" not in result.stderr

"""``nodecast train`` with no hyper-parameter option gives a sensible model whose float32 export
loses no measurable accuracy (SPEC "Numerics": less than 5% of the model's own validation error),
measured with onnxruntime on the artifact nodecast.compiler.emit writes."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.cli import main
from nodecast.compiler import emit, load, reference
from nodecast.compiler.csvio import write_table


def _friedman(rows, noise, seed):
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark

    X, y = make_friedman1(rows, n_features=5, noise=noise, random_state=seed)
    return np.column_stack([X, y])


def _demo(rows, noise, seed):
    from nodecast.cli import demo_scenario as demo

    return demo.make_readings(rows, seed, noise=0.3 if noise else 0.0)


def _onnxruntime(artifact, X):
    import onnxruntime as ort

    (model,) = artifact.files.values()
    options = ort.SessionOptions()
    options.intra_op_num_threads = 1
    session = ort.InferenceSession(model, options, providers=["CPUExecutionProvider"])
    dtype = np.float32 if artifact.summary["precision"] == "float32" else np.float64
    return session.run(["outputs"], {"features": X.astype(dtype)})[0].astype(np.float64)


@pytest.mark.parametrize("make, rmse_bound", [(_friedman, 0.6), (_demo, 1.0)])
@pytest.mark.slow
def test_default_model_is_sensible_and_its_float32_export_keeps_its_accuracy(tmp_path, make,
                                                                              rmse_bound):
    table = make(2000, True, 1)
    header = [f"x{i}" for i in range(table.shape[1] - 1)] + ["y"]
    (tmp_path / "d.csv").write_text(write_table(header, table.tolist()), encoding="utf-8")
    main(["train", str(tmp_path / "d.csv"), "--target", "y", "-o", str(tmp_path / "m.ncast")])
    bundle = load(tmp_path / "m.ncast")
    test = make(3000, False, 2)
    X, y = test[:, :-1], test[:, -1]
    fitted = reference.predict(bundle.network, X)[:, 0]
    assert np.sqrt(np.mean((fitted - y) ** 2)) < rmse_bound  # noiseless held-out rows
    validation = bundle.metadata["metrics"]["validation"]["rmse"][0]
    low, high = bundle.network.domain_low, bundle.network.domain_high
    probes = np.vstack([X, low + np.random.default_rng(3).random((20000, X.shape[1])) * (high - low)])
    expected = reference.predict(bundle.network, probes)
    float32 = np.max(np.abs(_onnxruntime(emit(bundle, "onnx", precision="float32"), probes) - expected))
    assert float32 < 0.01 * validation, (float32, validation, bundle.metadata["ridge"])
    # float64 artifacts agree with the reference within 1e-10 of the output range (SPEC)
    float64 = np.max(np.abs(_onnxruntime(emit(bundle, "onnx", precision="float64"), probes) - expected))
    assert float64 < 1e-10 * np.ptp(expected)
    assert bundle.metadata["ridge"]["rule"] == "gcv+heldout+float32"

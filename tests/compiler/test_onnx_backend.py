"""The ONNX back-end against the ONNX standard's own tools and the float64 reference."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.compiler import NodecastError, emit, reference
from nodecast.compiler.backends import onnx as onnx_backend
from nodecast.compiler.domain_points import domain_probes

onnx = pytest.importorskip("onnx")
ort = pytest.importorskip("onnxruntime")
from onnx.reference import ReferenceEvaluator  # noqa: E402  (the ONNX project's operator semantics)


def _model_bytes(bundle, **options) -> bytes:
    return emit(bundle, "onnx", **options).files["model.onnx"]


def _run_ort(data: bytes, X, dtype):
    session = ort.InferenceSession(data, providers=["CPUExecutionProvider"])
    return session.run(None, {"features": X.astype(dtype)})


def _run_reference_evaluator(data: bytes, X, dtype):
    return ReferenceEvaluator(onnx.load_from_string(data)).run(None, {"features": X.astype(dtype)})


def _holdout_rmse(bundle) -> float:
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(2000, n_features=5, noise=0.0, random_state=99)
    return float(np.sqrt(np.mean((reference.predict(bundle.network, X)[:, 0] - y) ** 2)))


def test_graph_passes_full_check_and_strict_shape_inference(friedman_bundle):
    model = onnx.load_from_string(_model_bytes(friedman_bundle, flag_out_of_domain=True))
    onnx.checker.check_model(model, full_check=True)
    inferred = onnx.shape_inference.infer_shapes(model, strict_mode=True)
    dims = inferred.graph.output[0].type.tensor_type.shape.dim
    assert dims[0].dim_param == "batch" and dims[1].dim_value == 1
    assert [n.op_type for n in model.graph.node][:3] == ["Gemm", "Sigmoid", "Gemm"]


@pytest.mark.parametrize("batch", [1, 7, 10_000])
@pytest.mark.parametrize("runner", [_run_ort, _run_reference_evaluator])
def test_float64_graph_matches_reference_within_1e_10_of_range(friedman_bundle, batch, runner):
    X = domain_probes(friedman_bundle.network, count=16384, seed=3)[:batch]
    want = reference.predict(friedman_bundle.network, X)
    (got,) = runner(_model_bytes(friedman_bundle, precision="float64"), X, np.float64)
    output_range = np.ptp(reference.predict(friedman_bundle.network, domain_probes(friedman_bundle.network)))
    assert np.max(np.abs(got - want)) <= 1e-10 * output_range  # SPEC "Numerics"


@pytest.mark.parametrize("batch", [1, 7, 10_000])
@pytest.mark.parametrize("runner", [_run_ort, _run_reference_evaluator])
def test_float32_graph_within_estimate_and_5_percent_of_validation_error(friedman_bundle, batch, runner):
    artifact = emit(friedman_bundle, "onnx", precision="float32")
    X = domain_probes(friedman_bundle.network, count=16384, seed=4)[:batch]
    want = reference.predict(friedman_bundle.network, X)
    (got,) = runner(artifact.files["model.onnx"], X, np.float32)
    error = np.max(np.abs(got - want))
    # IEEE 754 single precision (eps = 2^-23) rounding, amplified by the model: the estimate covers it
    assert error <= artifact.summary["estimate"]["max_abs_error"]
    assert error < 0.05 * _holdout_rmse(friedman_bundle)


@pytest.mark.slow
def test_estimate_covers_ill_conditioned_float32_export(ill_conditioned_bundle):
    artifact = emit(ill_conditioned_bundle, "onnx", precision="float32")
    X = domain_probes(ill_conditioned_bundle.network, count=8192, seed=5)
    (got,) = _run_ort(artifact.files["model.onnx"], X, np.float32)
    error = np.max(np.abs(got - reference.predict(ill_conditioned_bundle.network, X)))
    assert error <= artifact.summary["estimate"]["max_abs_error"]


def test_classifier_outputs_scores_and_original_string_labels(classifier_bundle):
    net = classifier_bundle.network
    X = domain_probes(net, count=4096, seed=6)
    data = _model_bytes(classifier_bundle, precision="float32")
    want_scores = reference.predict(net, X)
    ordered = np.sort(want_scores, axis=1)
    clear = ordered[:, -1] - ordered[:, -2] > 1e-4  # near-ties may fall either way in float32
    for runner in (_run_ort, _run_reference_evaluator):
        scores, labels = runner(data, X, np.float32)
        assert np.max(np.abs(scores - want_scores)) < 1e-3
        want_labels = reference.predict_labels(net, X)
        assert [str(v) for v in np.asarray(labels)[clear]] == list(want_labels[clear])
    assert {"setosa", "versi'color", 'virgin"ica'} == set(map(str, labels))


@pytest.mark.parametrize("opset", [o for o in onnx_backend.SUPPORTED_OPSETS
                                   if o >= onnx_backend.FLAG_OPSET])
def test_every_supported_opset_checks_and_runs(friedman_bundle, opset):
    data = _model_bytes(friedman_bundle, opset=opset, flag_out_of_domain=True)
    model = onnx.load_from_string(data)
    onnx.checker.check_model(model, full_check=True)
    assert model.opset_import[0].version == opset
    X = domain_probes(friedman_bundle.network, count=64, seed=7)
    got, flags = _run_ort(data, X, np.float32)
    assert got.shape == (X.shape[0], 1) and not flags.any()


def test_newest_supported_opset_is_one_the_installed_checker_knows():
    assert onnx_backend.NEWEST_OPSET == max(onnx_backend.SUPPORTED_OPSETS)
    assert onnx_backend.NEWEST_OPSET <= onnx.defs.onnx_opset_version()


def test_clamp_policy_and_out_of_domain_flag(friedman_bundle):
    net = friedman_bundle.network
    X = np.vstack([domain_probes(net, count=32, seed=8),
                   net.domain_high + 5.0, net.domain_low - 1e6,
                   np.where(np.arange(5) == 2, np.nan, net.domain_low)])
    got, flags = _run_ort(_model_bytes(friedman_bundle, precision="float64", out_of_domain="clamp",
                                       flag_out_of_domain=True), X, np.float64)
    finite = ~np.isnan(X).any(axis=1)
    want = reference.predict(net, X[finite], out_of_domain="clamp")
    assert np.max(np.abs(got[finite] - want)) < 1e-9
    assert list(flags) == list(reference.outside_domain(net, X))
    assert flags[-3:].all() and not flags[:32].any()


def test_metadata_describes_the_model(friedman_bundle):
    model = onnx.load_from_string(_model_bytes(friedman_bundle))
    props = {p.key: p.value for p in model.metadata_props}
    assert props["nodecast.bundle_id"] == friedman_bundle.bundle_id
    assert json.loads(props["nodecast.feature_names"]) == list(friedman_bundle.network.feature_names)
    domain = json.loads(props["nodecast.domain"])
    assert np.allclose(domain, np.column_stack([friedman_bundle.network.domain_low,
                                                friedman_bundle.network.domain_high]))
    assert model.producer_name == "nodecast" and "not a safety function" in model.doc_string
    assert friedman_bundle.bundle_id in model.doc_string


def test_same_bundle_gives_same_bytes(friedman_bundle):
    assert _model_bytes(friedman_bundle) == _model_bytes(friedman_bundle)


def test_far_narrow_domain_is_costed_and_kept_explicit(friedman_bundle):
    # Domain 1e4..1e4+1: float32 inputs alone carry ~1e4 * 2^-24 of rounding, and folding would make
    # z = A'x + b' cancel at that magnitude too. The estimate must own both; the graph keeps Sub/Div.
    net = friedman_bundle.network
    shifted = friedman_bundle.__class__(
        net.replace(input_offset=net.input_offset + 1e4, domain_low=net.domain_low + 1e4,
                    domain_high=net.domain_high + 1e4), friedman_bundle.metadata)
    artifact = emit(shifted, "onnx", precision="float32")
    assert artifact.summary["input_scaling"] == "explicit"
    X = domain_probes(shifted.network, count=4096, seed=9)
    (got,) = _run_ort(artifact.files["model.onnx"], X, np.float32)
    error = np.max(np.abs(got - reference.predict(shifted.network, X)))
    estimate = artifact.summary["estimate"]["max_abs_error"]
    assert error <= estimate
    assert estimate > 10 * emit(friedman_bundle, "onnx").summary["estimate"]["max_abs_error"]


@pytest.mark.parametrize("options, message", [
    ({"precision": "q15"}, "onnx takes precision float64, float32 only"),
    ({"opset": 8}, "an integer 9..28"),
    ({"opset": 13.0}, "an integer 9..28"),
    ({"opset": 17, "flag_out_of_domain": True}, "needs opset 18"),
    ({"out_of_domain": "reject"}, "cannot refuse"),
])
def test_unsupported_options_are_refused(friedman_bundle, options, message):
    with pytest.raises(NodecastError, match=message):
        emit(friedman_bundle, "onnx", **options)


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

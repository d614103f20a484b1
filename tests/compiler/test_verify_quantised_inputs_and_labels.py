"""Regressions found by review: a q15/q31 artifact judged on the inputs it actually sees, and
classifier label outputs checked against the artifact's own scores."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import emit, reference
from nodecast.compiler.verify import format_table, verify
from nodecast.compiler.verify.compare import _outside_fixed, compare_family
from nodecast.compiler.verify.probes import ProbeFamily
from nodecast.compiler.verify.runners import c as c_runner
from nodecast.compiler.verify.runners import onnx as onnx_runner
from tests.compiler.c_support import emit_c, need


@pytest.fixture(scope="module")
def q15_reject(friedman_bundle, tmp_path_factory):
    """A q15 reject artifact of the Friedman bundle and its runner description."""
    need("gcc")
    folder = tmp_path_factory.mktemp("q15-reject")
    emit_c(friedman_bundle, folder, precision="q15", out_of_domain="reject")
    return folder, c_runner.describe(folder)


def _rows_at_high_bound(net, feature: int, offsets) -> np.ndarray:
    rows = np.tile(0.5 * (net.domain_low + net.domain_high), (len(offsets), 1))
    rows[:, feature] = net.domain_high[feature] + np.asarray(offsets)
    return rows


def test_describe_reads_the_input_formats(q15_reject):
    folder, info = q15_reject
    header = (folder / f"{info['prefix']}.h").read_text()
    for i, frac in enumerate(info["input_frac_bits"]):
        assert f"_INPUT_FRAC_BITS_{i} {frac}\n" in header
    assert len(info["input_frac_bits"]) == info["n_inputs"] == 5


def test_quantised_domain_test_matches_the_compiled_artifact(friedman_bundle, q15_reject):
    # gcc compiles the header's _Q_FROM_REAL (IEEE 754 double arithmetic); the rows the artifact
    # rejects must be exactly those the Python mirror calls outside, step by step across the bound
    folder, info = q15_reject
    net = friedman_bundle.network
    step = 2.0 ** -info["input_frac_bits"][0]
    offsets = np.linspace(-2.0, 2.0, 33) * step
    X = np.vstack([_rows_at_high_bound(net, 0, offsets),
                   np.tile(net.domain_low, (3, 1)) - np.array([[0.49], [0.51], [3.0]]) * step])
    rejected = np.all(np.isnan(c_runner.run(folder, X, info)), axis=1)
    mirror = _outside_fixed(net, X, info["input_frac_bits"], 16)
    assert rejected.any() and not rejected.all()
    np.testing.assert_array_equal(rejected, mirror)


def test_a_row_less_than_a_step_outside_passes_a_q15_reject_artifact(friedman_bundle, q15_reject):
    folder, info = q15_reject
    net = friedman_bundle.network
    step = 2.0 ** -info["input_frac_bits"][2]
    near = _rows_at_high_bound(net, 2, [0.25 * step])  # rounds onto the bound: accepted
    assert reference.outside_domain(net, near).all()
    report = verify(friedman_bundle, folder, data=near, count=128)
    data = [r for r in report.as_dict()["families"] if r["family"] == "data-outside"]
    assert report.passed and data and data[0]["rejected"] == 0 and data[0]["compared"] == 1


def test_a_row_well_outside_must_still_be_rejected(friedman_bundle, q15_reject):
    _, info = q15_reject
    net = friedman_bundle.network
    width = net.domain_high - net.domain_low
    far = _rows_at_high_bound(net, 2, [0.1 * width[2]])
    family = ProbeFamily("data", far, False)
    want = reference.predict(net, far)
    tol, out_range = np.full(1, 1.0), np.ones(1)
    accepted = compare_family(net, family, want, want, "reject", "q15", tol, out_range,
                              info["input_frac_bits"])
    assert not accepted["passed"] and "not rejected" in accepted["policy_violation"]
    refused = compare_family(net, family, np.full_like(want, np.nan), want, "reject", "q15", tol,
                             out_range, info["input_frac_bits"])
    assert refused["passed"] and refused["rejected"] == 1


@pytest.fixture(scope="module")
def iris_onnx(classifier_bundle, tmp_path_factory):
    """The classifier's ONNX file, and a copy whose class_labels initializer is permuted."""
    import onnx
    from onnx import numpy_helper

    folder = tmp_path_factory.mktemp("iris-onnx")
    honest = folder / "iris.onnx"
    honest.write_bytes(emit(classifier_bundle, "onnx", precision="float64").files["model.onnx"])
    model = onnx.load(str(honest))
    (table,) = [t for t in model.graph.initializer if t.name == "class_labels"]
    labels = numpy_helper.to_array(table)
    table.CopyFrom(numpy_helper.from_array(labels[[1, 2, 0]], "class_labels"))
    permuted = folder / "permuted.onnx"
    onnx.save(model, str(permuted))
    return honest, permuted


def test_onnx_runner_fetches_the_label_output(classifier_bundle, friedman_bundle, iris_onnx,
                                              tmp_path):
    honest, _ = iris_onnx
    info = onnx_runner.describe(honest)
    X = np.array([[5.1, 3.5, 1.4, 0.2], [6.7, 3.0, 5.2, 2.3]])  # iris rows 1 and 146 (Fisher 1936)
    for engine in onnx_runner.ENGINES:  # onnxruntime and the ONNX project's reference evaluator
        labels = onnx_runner.run_labels(honest, X, {**info, "engine": engine})
        assert list(labels) == ["setosa", 'virgin"ica']
    regressor = tmp_path / "y.onnx"
    regressor.write_bytes(emit(friedman_bundle, "onnx").files["model.onnx"])
    assert onnx_runner.run_labels(regressor, np.zeros((1, 5)), onnx_runner.describe(regressor)) is None


def test_verify_checks_the_label_output(classifier_bundle, iris_onnx):
    honest, permuted = iris_onnx
    good = verify(classifier_bundle, honest, count=128)
    assert good.passed
    assert all(r["labels"]["label_outputs_wrong"] == 0 for r in good.as_dict()["families"]
               if "labels" in r)
    # the scores are untouched, only the label table is permuted: only the label check can see it
    bad = verify(classifier_bundle, permuted, count=128)
    records = [r for r in bad.as_dict()["families"] if "labels" in r]
    assert not bad.passed and records
    assert all(r["labels"]["label_outputs_wrong"] > 0 for r in records if r["family"] == "sobol")
    assert all(r["within_tolerance"] and r["labels"]["disagreements"] == 0 for r in records)
    assert "label output(s) are not the class" in format_table(bad)

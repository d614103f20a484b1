"""verify end to end on ONNX artifacts: what it measures, what it reports, and how it refuses."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest

from nodecast.compiler import emit, reference, save
from nodecast.compiler.csvio import write_table
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify import check, verify
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.report import to_json
from nodecast.compiler.verify.runners import detect_kind
from tests.helpers import run_cli

SCHEMA_KEYS = {"passed", "bundle_id", "task", "artifact", "outputs", "max_abs_error",
               "max_rel_error", "tolerance", "typical_estimate", "probes", "families", "notes",
               "certified_bound", "accuracy_budget", "sound", "within_budget",
               "measured_max_abs_error"}



@pytest.fixture(scope="module")
def onnx_files(friedman_bundle, tmp_path_factory):
    folder = tmp_path_factory.mktemp("verify")
    paths = {"bundle": save(friedman_bundle, folder / "m.ncast")}
    for precision in ("float32", "float64"):
        paths[precision] = folder / "m32.onnx" if precision == "float32" else folder / "m64.onnx"
        emit(friedman_bundle, "onnx", paths[precision], precision=precision)
    paths["clamp"] = folder / "clamp.onnx"
    emit(friedman_bundle, "onnx", paths["clamp"], out_of_domain="clamp")
    return paths


@pytest.mark.parametrize("precision", ["float32", "float64"])
@pytest.mark.slow
def test_default_model_passes_in_both_engines_with_the_documented_schema(
        friedman_bundle, onnx_files, precision):
    report = verify(friedman_bundle, onnx_files[precision], count=2048)
    doc = report.as_dict()
    assert report.passed and SCHEMA_KEYS <= set(doc)
    assert doc["artifact"]["engines"] == ["onnxruntime", "onnx.reference"]
    assert {r["engine"] for r in doc["families"]} == {"onnxruntime", "onnx.reference"}
    assert doc["max_abs_error"] <= min(doc["tolerance"]["per_output"])
    assert doc["tolerance"]["source"] == "certified" and doc["artifact"]["precision"] == precision
    assert doc["sound"] and doc["within_budget"]
    assert max(doc["measured_max_abs_error"]) == doc["max_abs_error"]
    assert doc["probes"]["families"]["sobol"] == 2048 and doc["probes"]["families"]["corners"] == 32
    if precision == "float64":  # SPEC "Numerics": default float64 artifacts within 1e-10 of range
        assert doc["max_rel_error"] <= 1e-10
    assert json.loads(to_json(doc)) == json.loads(json.dumps(doc))


def test_measured_error_equals_onnxruntimes_own_difference(friedman_bundle, onnx_files):
    """The report's figure is what onnxruntime (an outside runtime) really computes."""
    import onnxruntime as ort

    net = friedman_bundle.network
    doc = verify(friedman_bundle, onnx_files["float32"], count=512, seed=3).as_dict()
    sobol = next(f for f in probe_families(net, count=512, seed=3) if f.name == "sobol")
    session = ort.InferenceSession(str(onnx_files["float32"]), providers=["CPUExecutionProvider"])
    (got,) = session.run(["outputs"], {"features": sobol.X.astype(np.float32)})
    direct = np.max(np.abs(got - reference.predict(net, sobol.X)))
    row = next(r for r in doc["families"]
               if r["family"] == "sobol" and r["engine"] == "onnxruntime")
    assert row["max_abs_error"] == pytest.approx(direct, rel=1e-12)


def test_clamping_artifact_is_judged_on_the_clamped_reference(friedman_bundle, onnx_files):
    doc = verify(friedman_bundle, onnx_files["clamp"], count=256).as_dict()
    assert doc["passed"] and doc["artifact"]["out_of_domain"] == "clamp"
    outside = [r for r in doc["families"] if r["family"] == "outside"]
    assert outside and all(r["compared"] == r["count"] and r["policy_honoured"] for r in outside)


def _relabel_policy(source, target, policy):
    import onnx

    model = onnx.load(str(source))
    for prop in model.metadata_props:
        if prop.key == "nodecast.out_of_domain":
            prop.value = policy
    onnx.save(model, str(target))


def test_an_artifact_that_does_not_apply_its_stated_policy_fails_outside_only(
        friedman_bundle, onnx_files, tmp_path):
    liar = tmp_path / "says-clamp.onnx"
    _relabel_policy(onnx_files["float64"], liar, "clamp")  # computes 'pass', claims 'clamp'
    doc = verify(friedman_bundle, liar, count=256).as_dict()
    failed = {r["family"] for r in doc["families"] if not r["passed"]}
    assert not doc["passed"] and failed == {"outside"}


def test_pass_policy_outside_probes_get_the_estimate_at_those_probes(friedman_bundle, onnx_files):
    doc = verify(friedman_bundle, onnx_files["float32"], count=256).as_dict()
    inside = next(r for r in doc["families"] if r["family"] == "sobol")
    outside = next(r for r in doc["families"] if r["family"] == "outside")
    assert outside["tolerance"][0] >= inside["tolerance"][0] == doc["tolerance"]["per_output"][0]


def test_classifier_verifies_labels_and_scores(classifier_bundle, tmp_path):
    path = tmp_path / "iris.onnx"
    emit(classifier_bundle, "onnx", path, precision="float32")
    doc = verify(classifier_bundle, path, count=1024).as_dict()
    assert doc["passed"] and doc["task"] == "classification"
    labelled = [r for r in doc["families"] if "labels" in r]
    assert labelled and all(r["labels"]["disagreements"] == 0 for r in labelled)


def test_tight_override_fails_and_the_report_says_why(friedman_bundle, onnx_files):
    """An accuracy budget below the certified bound fails the verdict (the artifact is sound, but
    not proven within the budget), and the report says why."""
    doc = verify(friedman_bundle, onnx_files["float32"], count=256, abs_tol=1e-9).as_dict()
    assert not doc["passed"] and doc["sound"] and not doc["within_budget"]
    assert doc["accuracy_budget"]["source"] == "abs-tol"
    assert doc["accuracy_budget"]["per_output"] == [1e-9]
    assert any(n.startswith("accuracy: the certified bound") for n in doc["notes"])
    doc = verify(friedman_bundle, onnx_files["float32"], count=256, rel_tol=0.5).as_dict()
    out_range = doc["max_abs_error"] / doc["max_rel_error"]
    assert doc["passed"]
    assert doc["accuracy_budget"]["per_output"][0] == pytest.approx(0.5 * out_range)


def test_same_seed_same_report_bytes(friedman_bundle, onnx_files):
    first = to_json(verify(friedman_bundle, onnx_files["float32"], count=128, seed=4).as_dict())
    again = to_json(verify(friedman_bundle, onnx_files["float32"], count=128, seed=4).as_dict())
    other = to_json(verify(friedman_bundle, onnx_files["float32"], count=128, seed=5).as_dict())
    assert first == again and first != other


def test_check_returns_the_report_or_raises_assertion_with_the_table(friedman_bundle, onnx_files,
                                                                      tmp_path):
    net = friedman_bundle.network
    csv = tmp_path / "rows.csv"
    csv.write_text(write_table(net.feature_names, probe_families(net, count=8)[0].X.tolist()))
    doc = check(onnx_files["bundle"], onnx_files["float32"], data=csv, count=128)
    assert doc["passed"] and doc["probes"]["families"]["data"] == 8
    with pytest.raises(AssertionError, match="verification FAILED") as failure:
        check(friedman_bundle, onnx_files["float32"], count=128, abs_tol=0.0)
    assert "sobol" in str(failure.value)


def test_kind_is_detected_from_the_file_not_only_its_name(onnx_files, tmp_path):
    renamed = tmp_path / "model.bin"
    shutil.copy(onnx_files["float32"], renamed)
    assert detect_kind(onnx_files["float32"]) == "onnx" and detect_kind(renamed) == "onnx"
    (tmp_path / "notes.txt").write_text("hello")
    with pytest.raises(NodecastError, match="cannot tell the kind"):
        detect_kind(tmp_path / "notes.txt")
    with pytest.raises(NodecastError, match="no generated C sources"):
        detect_kind(tmp_path)


def test_cli_exit_status_report_and_junit(capsys, onnx_files, tmp_path):
    report, junit = tmp_path / "r.json", tmp_path / "j.xml"
    status, out, _ = run_cli(capsys, "verify", onnx_files["bundle"], onnx_files["float32"],
                             "--probes", "256", "--report", report, "--junit", junit)
    assert status == 0 and "verification PASSED" in out
    assert json.loads(report.read_text())["passed"] is True
    assert junit.read_text().startswith("<?xml")
    status, out, _ = run_cli(capsys, "verify", onnx_files["bundle"], onnx_files["float32"],
                             "--probes", "256", "--abs-tol", "1e-12", "--report", report,
                             "--overwrite")
    assert status == 1 and "verification FAILED" in out
    assert json.loads(report.read_text())["passed"] is False


def test_cli_bad_input_is_exit_2_with_one_line(capsys, onnx_files, friedman_bundle_factory,
                                               tmp_path):
    other = tmp_path / "other.onnx"
    emit(friedman_bundle_factory(n_nodes=20, rows=200, seed=9), "onnx", other)
    garbage = tmp_path / "garbage.onnx"
    garbage.write_bytes(b"\x08\x07not a model at all" * 10)
    partial = tmp_path / "partial.csv"
    partial.write_text("x0,x1,x2,x3\n0.1,0.2,0.3,0.4\n")
    cases = [((other,), "not from this bundle"), ((garbage,), "garbage.onnx"),
             ((onnx_files["float32"], "--data", partial), "'x4'"),
             ((tmp_path / "missing.onnx",), "does not exist")]
    for args, needle in cases:
        status, out, err = run_cli(capsys, "verify", onnx_files["bundle"], *args)
        assert status == 2, (args, out, err)
        assert needle in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err

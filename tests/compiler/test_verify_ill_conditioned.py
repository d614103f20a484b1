"""An ill-conditioned model (lambda = 0, many nodes) exported in float32: the tolerance derived from
its estimate accepts what float32 really does, a float64-grade tolerance rejects it, and the report
says why (the rule and the estimate)."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import emit
from nodecast.compiler.typical_error import UNIT_ROUNDOFF
from nodecast.compiler.verify import format_table, verify

pytestmark = pytest.mark.slow  # the 1,500-node ridge-0 fixture takes 20 s to fit


@pytest.fixture(scope="module")
def reports(ill_conditioned_bundle, tmp_path_factory):
    folder = tmp_path_factory.mktemp("ill")
    out = {}
    for precision in ("float32", "float64"):
        path = folder / f"{precision}.onnx"
        emit(ill_conditioned_bundle, "onnx", path, precision=precision)
        out[precision] = path
    out["float64-report"] = verify(ill_conditioned_bundle, out["float64"], count=1024)
    return out


def test_float32_is_sound_within_its_certified_bound(ill_conditioned_bundle, reports):
    report = verify(ill_conditioned_bundle, reports["float32"], count=1024)
    doc = report.as_dict()
    assert doc["sound"]
    # float32 really loses accuracy here: 100 times more than one rounding of the output (IEEE 754
    # binary32 unit roundoff 2^-24) would cost; the cancelling output weights amplify it
    assert doc["max_rel_error"] > 100 * UNIT_ROUNDOFF["float32"]
    assert doc["max_abs_error"] <= min(doc["tolerance"]["per_output"])
    assert np.max(np.abs(ill_conditioned_bundle.network.output_weights)) > 1e3  # ill-conditioned


def test_float32_fails_at_a_float64_grade_tolerance_and_the_report_says_why(
        ill_conditioned_bundle, reports):
    float64_doc = reports["float64-report"].as_dict()
    assert float64_doc["passed"]
    grade = float64_doc["tolerance"]["per_output"][0]  # what a float64 artifact is held to
    report = verify(ill_conditioned_bundle, reports["float32"], count=1024, abs_tol=grade)
    doc = report.as_dict()
    assert not report.passed and doc["max_abs_error"] > 100 * grade
    assert doc["accuracy_budget"]["rule"].startswith("--abs-tol")
    (note,) = [n for n in doc["notes"] if n.startswith("accuracy: the certified bound")]
    assert f"{doc['certified_bound'][0]:.3e}" in note
    table = format_table(report)
    assert "verification FAILED" in table and note in table

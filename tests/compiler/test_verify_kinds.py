"""Every artifact kind whose back-end exists, under every out-of-domain policy it takes: an honest
artifact passes, and the policy is what verify checked on the outside probes."""

from __future__ import annotations

import pytest

from nodecast.compiler import emit
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify import verify
from nodecast.compiler.verify.runners import RUNNERS, available_kinds

NAMES = {"onnx": "model.onnx", "python": "predictor.py", "c": "model_c"}
POLICIES = ("clamp", "pass", "reject")


def _emit_or_skip(bundle, kind, path, **options):
    if kind not in available_kinds():
        pytest.skip(f"the {kind} back-end or runner is not in this tree yet")
    try:
        emit(bundle, kind, path, **options)
    except NodecastError as exc:
        if "out-of-domain" in str(exc) or "policy" in str(exc):
            pytest.skip(f"{kind} does not take {options}: {exc}")
        raise


@pytest.mark.parametrize("policy", POLICIES)
@pytest.mark.parametrize("kind", list(RUNNERS))
def test_honest_artifact_passes_and_its_policy_is_checked(friedman_bundle, tmp_path, kind, policy):
    path = tmp_path / NAMES[kind]
    _emit_or_skip(friedman_bundle, kind, path, out_of_domain=policy)
    doc = verify(friedman_bundle, path, count=512).as_dict()
    assert doc["passed"], doc["notes"]
    assert doc["artifact"]["out_of_domain"] == policy
    for record in (r for r in doc["families"] if r["family"] == "outside"):
        expected_rejected = record["count"] if policy == "reject" else 0
        assert record["rejected"] == expected_rejected and record["policy_honoured"]
        assert record["compared"] == record["count"] - expected_rejected


@pytest.mark.parametrize("kind", list(RUNNERS))
def test_classifier_artifacts_agree_on_labels(classifier_bundle, tmp_path, kind):
    path = tmp_path / NAMES[kind]
    _emit_or_skip(classifier_bundle, kind, path)
    doc = verify(classifier_bundle, path, count=512).as_dict()
    assert doc["passed"], doc["notes"]
    labelled = [r for r in doc["families"] if "labels" in r]
    assert labelled and sum(r["labels"]["disagreements"] for r in labelled) == 0

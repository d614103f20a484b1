"""Judging rules (policies, near-ties) and the report formats (table, JSON, JUnit XML)."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from nodecast.compiler import emit, reference
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.verify import format_table, verify
from nodecast.compiler.verify.compare import _label_counts, compare_family
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.report import to_json, verify_junit


def _families(net):
    return {f.name: f for f in probe_families(net, count=64, seed=0)}


def _judge(net, family, got, policy, precision="float64", tol=1e-9):
    want = reference.predict(net, family.X, "clamp" if policy == "clamp" else "pass")
    return compare_family(net, family, got, want, policy, precision,
                          np.full(net.n_outputs, tol), np.ones(net.n_outputs))


def test_reject_policy_needs_nan_rows_outside_and_values_inside(friedman_bundle):
    net = friedman_bundle.network
    fams = _families(net)
    outside, inside = fams["outside"], fams["sobol"]
    exact = reference.predict(net, outside.X)
    rejected = np.full_like(exact, np.nan)
    assert _judge(net, outside, rejected, "reject")["passed"]
    not_rejected = _judge(net, outside, exact, "reject")
    assert not not_rejected["passed"] and "not rejected" in not_rejected["policy_violation"]
    over_eager = _judge(net, inside, np.full((len(inside.X), 1), np.nan), "reject")
    assert not over_eager["passed"]
    assert "inside the domain rejected" in over_eager["policy_violation"]
    assert _judge(net, inside, reference.predict(net, inside.X), "reject")["passed"]


def test_reject_accepts_either_answer_on_rows_that_rounding_moves_across_a_bound(friedman_bundle):
    """One float64 ulp below a bound is outside in float64 but, rounded to the nearest float32 (IEEE
    754 round-to-nearest), lands on the float32 bound, inside: either answer is right there."""
    net = friedman_bundle.network
    row = 0.5 * (net.domain_low + net.domain_high)
    row[0] = np.nextafter(net.domain_low[0], -np.inf)
    assert np.float32(row[0]) == np.float32(net.domain_low[0])
    family = type(_families(net)["outside"])("edge", row[None, :], False)
    assert reference.outside_domain(net, family.X)[0]
    evaluated = reference.predict(net, family.X)
    for got in (evaluated, np.full_like(evaluated, np.nan)):
        assert _judge(net, family, got, "reject", precision="float32", tol=1e-6)["passed"]
    assert not _judge(net, family, evaluated, "reject", precision="float64")["passed"]


def test_pass_policy_must_not_reject(friedman_bundle):
    net = friedman_bundle.network
    outside = _families(net)["outside"]
    result = _judge(net, outside, np.full((len(outside.X), 1), np.nan), "pass")
    assert not result["passed"] and "rejected although" in result["policy_violation"]
    assert result["compared"] == 0


def test_nan_output_where_reference_is_finite_is_an_infinite_error(friedman_bundle):
    net = friedman_bundle.network
    sobol = _families(net)["sobol"]
    got = reference.predict(net, sobol.X)
    got[3, 0] = np.inf
    result = _judge(net, sobol, got, "pass")
    assert result["max_abs_error"] == np.inf and not result["within_tolerance"]
    assert json.loads(to_json({"e": result["max_abs_error"]})) == {"e": "inf"}  # strict JSON


def test_near_ties_are_counted_apart_and_do_not_fail():
    tol = np.array([0.1, 0.1, 0.1])
    want = np.array([[1.0, 0.95, 0.0],    # near-tie: gap 0.05 <= 0.2
                     [1.0, 0.0, 0.5],     # clear winner (gap 0.5)
                     [0.2, 0.9, 0.85]])   # near-tie
    got = np.array([[0.97, 0.99, 0.0],    # flipped on a near-tie: counted, not failed
                    [1.0, 0.0, 0.5],
                    [0.2, 0.9, 0.85]])
    assert _label_counts(got, want, tol) == {"near_ties": 2, "near_tie_flips": 1,
                                             "disagreements": 0}
    got[1] = [0.4, 0.0, 0.5]              # flipped where the winner is clear: a failure
    assert _label_counts(got, want, tol)["disagreements"] == 1


def _junit_tree(text: str) -> ET.Element:
    root = ET.fromstring(text.encode("utf-8"))
    # the layout CI servers read (common practice: Ant's JUnit report as read by Jenkins, GitLab)
    assert root.tag == "testsuites"
    for key in ("tests", "failures", "errors"):
        assert root.get(key).isdigit()
    suites = root.findall("testsuite")
    assert suites and int(root.get("tests")) == sum(int(s.get("tests")) for s in suites)
    for suite in suites:
        cases = suite.findall("testcase")
        assert suite.get("name") and int(suite.get("tests")) == len(cases)
        assert int(suite.get("failures")) == sum(1 for c in cases if c.find("failure") is not None)
        assert suite.get("errors") == "0" and suite.get("skipped") == "0"
        assert all(p.get("name") and p.get("value") is not None
                   for p in suite.find("properties").findall("property"))
        assert suite.find("system-out") is not None
        for case in cases:
            assert case.get("classname") and case.get("name")
            failure = case.find("failure")
            assert failure is None or (failure.get("message") and failure.get("type"))
    return root


def test_junit_has_one_case_per_family_and_engine(friedman_bundle, tmp_path):
    path = tmp_path / "m.onnx"
    emit(friedman_bundle, "onnx", path)
    doc = verify(friedman_bundle, path, count=128).as_dict()
    root = _junit_tree(verify_junit(doc))
    assert root.get("failures") == "0"
    names = {(s.get("name"), c.get("name")) for s in root for c in s.findall("testcase")}
    assert names == {(f"nodecast.verify.onnx.{r['engine']}", r["family"]) for r in doc["families"]}
    failing = verify(friedman_bundle, path, count=128, abs_tol=1e-12).as_dict()
    root = _junit_tree(verify_junit(failing))  # a budget below the certified bound: one case each
    assert int(root.get("failures")) == len(failing["artifact"]["engines"])
    failed = [c for s in root for c in s.findall("testcase") if c.find("failure") is not None]
    assert {c.get("name") for c in failed} == {"accuracy-budget"}
    assert "exceeds the budget" in failed[0].find("failure").get("message")


def test_hostile_names_keep_the_xml_and_table_well_formed(friedman_bundle, tmp_path):
    hostile = 'y"<\x01/>]]>\n{{ }} */'
    net = friedman_bundle.network.replace(target_names=(hostile,), target_units=("\x1b[31m",))
    bundle = Bundle(net, friedman_bundle.metadata)
    path = tmp_path / "h.onnx"
    emit(bundle, "onnx", path)
    doc = verify(bundle, path, count=64, abs_tol=0.0).as_dict()
    root = _junit_tree(verify_junit(doc))
    assert repr(hostile) in root.find("testsuite/testcase/failure").get("message")
    assert "verification FAILED" in format_table(doc)


def test_table_shows_every_family_and_the_tolerance_rule(friedman_bundle, tmp_path):
    path = tmp_path / "m.onnx"
    emit(friedman_bundle, "onnx", path)
    doc = verify(friedman_bundle, path, count=64).as_dict()
    table = format_table(doc)
    for record in doc["families"]:
        assert any(line.startswith(f"{record['engine']:<15} {record['family']}")
                   for line in table.splitlines())
    assert f"certified bound {doc['certified_bound'][0]:.3e}" in table
    assert doc["accuracy_budget"]["rule"] in table
    assert table.splitlines()[-1].startswith("verification PASSED")


@pytest.mark.parametrize("value", [float("nan"), float("-inf")])
def test_json_writer_never_emits_non_standard_numbers(value):
    text = to_json({"a": [value, 1.5]})
    assert "NaN" not in text and "Infinity" not in text and json.loads(text)["a"][1] == 1.5

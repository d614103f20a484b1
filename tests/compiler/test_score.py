"""score: metrics checked against sklearn.metrics; gates, baseline margins, reports."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from sklearn import metrics as skm  # the reference implementation every metric is checked against

from nodecast.compiler import reference, save
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.csvio import read_table, write_table
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.scoring import classification_metrics, regression_metrics, score
from tests.helpers import run_cli


@pytest.fixture(scope="module")
def friedman_rows():
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark

    X, y = make_friedman1(300, n_features=5, noise=1.0, random_state=42)
    return X, y


@pytest.fixture(scope="module")
def files(friedman_bundle, friedman_bundle_factory, classifier_bundle, friedman_rows,
          tmp_path_factory):
    from sklearn.datasets import load_iris

    folder = tmp_path_factory.mktemp("score")
    X, y = friedman_rows
    header = ["y", "note", "x4", "x3", "x2", "x1", "x0"]  # any column order, extra columns ignored
    rows = [[t, "n/a", *reversed(list(x))] for x, t in zip(X, y, strict=True)]
    (folder / "data.csv").write_text(write_table(header, rows))
    iris = load_iris()
    labels = np.array(["setosa", "versi'color", 'virgin"ica'], dtype=object)[iris.target]
    names = list(iris.feature_names) + ["species"]
    iris_rows = [[*x, label] for x, label in zip(iris.data, labels, strict=True)]
    (folder / "iris.csv").write_text(write_table(names, iris_rows))
    tagged = Bundle(classifier_bundle.network,
                    {**classifier_bundle.metadata, "targets": ["species"]})
    weak = friedman_bundle_factory(n_nodes=8, rows=2000, seed=0)
    return {"folder": folder, "good": save(friedman_bundle, folder / "good.ncast"),
            "weak": save(weak, folder / "weak.ncast"), "iris": save(tagged, folder / "iris.ncast"),
            "iris_untagged": save(classifier_bundle, folder / "iris0.ncast"),
            "data": folder / "data.csv", "iris_data": folder / "iris.csv", "weak_bundle": weak}


def test_regression_metrics_agree_with_sklearn(friedman_bundle, friedman_rows, files):
    X, y = friedman_rows
    doc = score(friedman_bundle, read_table(files["data"])).as_dict()
    pred = reference.predict(friedman_bundle.network, X)[:, 0]
    (target,) = doc["metrics"]["targets"]
    assert target["rmse"] == pytest.approx(np.sqrt(skm.mean_squared_error(y, pred)), rel=1e-12)
    assert target["mae"] == pytest.approx(skm.mean_absolute_error(y, pred), rel=1e-12)
    assert target["max_error"] == pytest.approx(skm.max_error(y, pred), rel=1e-12)
    assert target["r2"] == pytest.approx(skm.r2_score(y, pred), rel=1e-12)
    assert doc["rows"] == 300 and doc["passed"] and doc["gates"] == []


def test_multi_output_and_constant_target_follow_sklearn_conventions():
    rng = np.random.default_rng(0)
    truth = np.column_stack([rng.normal(size=50), np.full(50, 2.0), np.full(50, 3.0)])
    guess = truth + np.column_stack([rng.normal(size=50) * 0.1, np.zeros(50), np.full(50, 0.5)])
    got = regression_metrics(truth, guess, ["a", "b", "c"])
    for k, record in enumerate(got):  # r2_score's force_finite convention for constant targets
        assert record["r2"] == pytest.approx(skm.r2_score(truth[:, k], guess[:, k]), rel=1e-12)
        assert record["rmse"] == pytest.approx(
            np.sqrt(skm.mean_squared_error(truth[:, k], guess[:, k])), rel=1e-12)
    assert [r["r2"] for r in got[1:]] == [1.0, 0.0]


def test_classification_metrics_agree_with_sklearn_including_unseen_labels():
    truth = ["a", "b", "b", "c", "zz", "a", "c", "c"]
    guess = ["a", "b", "a", "c", "c", "a", "b", "c"]
    got = classification_metrics(truth, guess, ("a", "b", "c"))
    assert got["accuracy"] == pytest.approx(skm.accuracy_score(truth, guess))
    labels = ["a", "b", "c", "zz"]
    assert got["confusion"]["labels"] == labels and got["unknown_labels"] == ["zz"]
    assert got["confusion"]["matrix"] == skm.confusion_matrix(truth, guess, labels=labels).tolist()


def test_classifier_cli_reports_accuracy_and_confusion(capsys, files, classifier_bundle):
    report = files["folder"] / "iris.json"
    status, out, _ = run_cli(capsys, "score", files["iris"], files["iris_data"],
                             "--min-accuracy", "0.9", "--report", report)
    doc = json.loads(report.read_text())
    table = read_table(files["iris_data"])
    truth = table.texts("species")
    pred = reference.predict_labels(classifier_bundle.network,
                                    table.numbers(classifier_bundle.network.feature_names))
    assert doc["metrics"]["accuracy"] == pytest.approx(skm.accuracy_score(truth, list(pred)))
    assert status == 0 and "confusion" in out and "virgin\"ica" in out
    status, _, _ = run_cli(capsys, "score", files["iris"], files["iris_data"],
                           "--min-accuracy", "1.0")
    assert status == (0 if doc["metrics"]["accuracy"] == 1.0 else 1)


def test_rmse_gate_exit_status_and_reports(capsys, files, friedman_bundle):
    doc = score(friedman_bundle, read_table(files["data"])).as_dict()
    rmse = doc["metrics"]["targets"][0]["rmse"]
    report, junit = files["folder"] / "s.json", files["folder"] / "s.xml"
    status, out, _ = run_cli(capsys, "score", files["good"], files["data"], "--max-rmse",
                             repr(rmse * 1.001), "--report", report, "--junit", junit)
    assert status == 0 and "score PASSED" in out
    assert json.loads(report.read_text())["gates"][0]["passed"] is True
    status, out, _ = run_cli(capsys, "score", files["good"], files["data"], "--max-rmse",
                             repr(rmse * 0.999), "--junit", junit, "--overwrite")
    assert status == 1 and "score FAILED" in out
    root = ET.fromstring(junit.read_bytes())  # the common JUnit layout (common practice)
    suite = root.find("testsuite")
    assert root.tag == "testsuites" and root.get("failures") == "1" == suite.get("failures")
    case = suite.find("testcase")
    assert case.get("name") == "max-rmse:y" and case.find("failure").get("message")


def test_baseline_gate_applies_the_stated_relative_margin(capsys, files, friedman_bundle):
    table = read_table(files["data"])
    new = score(friedman_bundle, table).as_dict()["metrics"]["targets"][0]["rmse"]
    old = score(files["weak_bundle"], table).as_dict()["metrics"]["targets"][0]["rmse"]
    assert old > 1.05 * new  # the 8-node model is clearly worse
    status, _, _ = run_cli(capsys, "score", files["good"], files["data"],
                           "--baseline", files["weak"])
    assert status == 0
    status, out, _ = run_cli(capsys, "score", files["weak"], files["data"],
                             "--baseline", files["good"])
    assert status == 1 and "baseline" in out
    growth = old / new - 1.0  # the weak model's relative RMSE increase over the good one
    for margin, expected in ((growth * 1.01, 0), (growth * 0.99, 1)):
        status, _, _ = run_cli(capsys, "score", files["weak"], files["data"], "--baseline",
                               files["good"], "--rmse-margin", repr(margin))
        assert status == expected, margin
    assert score(friedman_bundle, table, baseline=friedman_bundle).passed  # equal is not worse


def test_accuracy_baseline_margin_is_an_absolute_drop(classifier_bundle, files):
    table = read_table(files["iris_data"])
    net = classifier_bundle.network
    swap = [0, 2, 1]  # a damaged model: the last two classes' scores swapped
    damaged = Bundle(net.replace(output_weights=net.output_weights[:, swap],
                                 output_bias=net.output_bias[swap]), classifier_bundle.metadata)
    good = score(classifier_bundle, table, label="species").as_dict()["metrics"]["accuracy"]
    bad = score(damaged, table, label="species").as_dict()["metrics"]["accuracy"]
    drop = good - bad
    assert drop > 0.1
    assert not score(damaged, table, baseline=classifier_bundle, label="species").passed
    assert score(damaged, table, baseline=classifier_bundle, label="species",
                 accuracy_margin=drop + 1e-9).passed


def test_bad_input_is_exit_2_with_one_line(capsys, files, friedman_bundle_factory):
    other_target = Bundle(files["weak_bundle"].network.replace(target_names=("z",)),
                          files["weak_bundle"].metadata)
    save(other_target, files["folder"] / "z.ncast", overwrite=True)
    no_target = files["folder"] / "features-only.csv"
    no_target.write_text("x0,x1,x2,x3,x4\n0.1,0.2,0.3,0.4,0.5\n")
    cases = [
        (("score", files["good"], files["data"], "--min-accuracy", "0.5"), "--min-accuracy"),
        (("score", files["good"], files["data"], "--baseline", files["folder"] / "z.ncast"),
         "same targets"),
        (("score", files["good"], no_target), "'y'"),
        (("score", files["iris_untagged"], files["iris_data"]), "--label-column"),
        (("score", files["good"], files["data"], "--max-rmse", "a,b"), "--max-rmse"),
        (("score", files["iris"], files["iris_data"], "--max-rmse", "1"), "--max-rmse"),
    ]
    for args, needle in cases:
        status, out, err = run_cli(capsys, *args)
        assert status == 2, (args, out, err)
        assert needle in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_untagged_classifier_scores_with_a_named_label_column(files, classifier_bundle):
    doc = score(classifier_bundle, read_table(files["iris_data"]), label="species").as_dict()
    assert doc["metrics"]["confusion"]["labels"] == list(classifier_bundle.network.class_labels)
    with pytest.raises(NodecastError, match="no column 'kind'"):
        score(classifier_bundle, read_table(files["iris_data"]), label="kind")

"""Classifier selection: the reuse path scores every grid point exactly as refitting each split
from scratch (scikit-learn's GridSearchCV with our classifier), by accuracy and by log-loss, on
scikit-learn's load_breast_cancer (Wolberg et al. 1995) and load_digits data; the chosen model's
held-out accuracy is sensible."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler.errors import NodecastError
from nodecast.trainer import RandomNodeClassifier
from nodecast.trainer.class_selection import fold_value, select_classifier
from nodecast.trainer.folds import fold_indices

SEED = 2
# ridges > 0 only: at lambda = 0 the prefix solve and the estimator's SVD solver agree to ~1e-13,
# which can still flip the argmax of a row whose two best scores tie to that precision
GRID = dict(nodes=[30, 90], neighbors=[None, 40], ridges=[1e-6, 1e-2])


def _log_loss(estimator, X, y) -> float:
    codes = np.searchsorted(estimator.classes_, y)
    return -fold_value(estimator.class_scores(X), codes, "log-loss")


def _gridsearch(X, y, scoring, folds):
    from sklearn.model_selection import GridSearchCV

    grid = {"n_nodes": GRID["nodes"], "n_neighbors": GRID["neighbors"], "ridge": GRID["ridges"]}
    return GridSearchCV(RandomNodeClassifier(random_state=SEED, slope_scale=1.0), grid,
                        cv=fold_indices(X, folds, SEED),
                        scoring="accuracy" if scoring == "accuracy" else _log_loss,
                        refit=False).fit(X, y)


def _compare(X, y, scoring, folds=3):
    ours = select_classifier(X, y, folds=folds, seed=SEED, scoring=scoring, **GRID)
    reference = _gridsearch(X, y, scoring, folds)
    by_key = {(p.nodes, p.neighbors, p.ridge): p for p in ours.points}
    results = reference.cv_results_
    sign = 1.0 if scoring == "accuracy" else -1.0
    for i, params in enumerate(results["params"]):
        point = by_key[(params["n_nodes"], params["n_neighbors"], params["ridge"])]
        theirs = sign * np.array([results[f"split{f}_test_score"][i] for f in range(folds)])
        assert np.allclose(point.fold_values, theirs, rtol=1e-9, atol=0), (params, point)
    best = reference.best_params_
    assert (ours.chosen.nodes, ours.chosen.neighbors, ours.chosen.ridge) == \
        (best["n_nodes"], best["n_neighbors"], best["ridge"])
    return ours


@pytest.mark.parametrize("scoring", ["accuracy", "log-loss"])
@pytest.mark.slow
def test_breast_cancer_reuse_path_equals_refits(scoring):
    from sklearn.datasets import load_breast_cancer  # Wolberg et al. (1995)

    X, y = load_breast_cancer(return_X_y=True)
    result = _compare(X, y, scoring)
    assert len(result.points) == 8
    # a refit on all rows with the chosen parameters is the plain classifier, bit for bit
    plain = RandomNodeClassifier(random_state=SEED, **result.chosen.params).fit(X, y)
    assert np.array_equal(plain.coef_, result.model.coef_)


@pytest.mark.slow
@pytest.mark.parametrize("scoring", ["accuracy", "log-loss"])
def test_digits_reuse_path_equals_refits(scoring):
    from sklearn.datasets import load_digits  # UCI optical digits, as shipped by scikit-learn

    X, y = load_digits(return_X_y=True)
    _compare(X, y, scoring)


@pytest.mark.parametrize("loader, floor", [
    ("load_breast_cancer", 0.93), pytest.param("load_digits", 0.93, marks=pytest.mark.slow)])
def test_chosen_model_classifies_held_out_rows(loader, floor):
    # 25% held out; floors well under the accuracy of a tuned linear model on these sets (about
    # 0.95-0.97, from memory), so a broken search or classifier fails
    import sklearn.datasets
    from sklearn.model_selection import train_test_split

    X, y = getattr(sklearn.datasets, loader)(return_X_y=True)
    X_fit, X_test, y_fit, y_test = train_test_split(X, y, test_size=0.25, random_state=0,
                                                    stratify=y)
    result = select_classifier(X_fit, y_fit, nodes=[100, 300], ridges=[1e-6, 1e-3, 1e-1],
                               folds=5, seed=0)
    accuracy = np.mean(result.model.predict(X_test) == y_test)
    assert accuracy >= floor, (accuracy, result.chosen)


@pytest.mark.slow
def test_results_do_not_depend_on_jobs():
    from sklearn.datasets import load_breast_cancer

    X, y = load_breast_cancer(return_X_y=True)
    one = select_classifier(X, y, nodes=[20], ridges=[1e-4], folds=3, n_jobs=1)
    two = select_classifier(X, y, nodes=[20], ridges=[1e-4], folds=3, n_jobs=2)
    assert one.points == two.points


@pytest.mark.parametrize("bad, message", [
    (dict(scoring="f1"), "scoring must be one of"),
    (dict(nodes=[0]), "nodes takes positive integers"),
])
def test_bad_settings_are_refused(bad, message):
    X = np.random.default_rng(0).random((40, 2))
    with pytest.raises(NodecastError, match=message):
        select_classifier(X, X[:, 0] > 0.5, folds=3, **bad)


def test_cli_select_classification_refit_equals_train_with_the_chosen_options(tmp_path):
    import json

    from sklearn.datasets import load_breast_cancer

    from nodecast.cli import main
    from nodecast.compiler.bundle import load
    from nodecast.compiler.csvio import write_table

    data = load_breast_cancer()
    X, labels = data.data[:300, :8], data.target_names[data.target[:300]]
    header = [f"f{i}" for i in range(8)] + ["diagnosis"]
    rows = [[*map(float, x), label] for x, label in zip(X, labels, strict=True)]
    (tmp_path / "d.csv").write_text(write_table(header, rows))
    args = ["select", str(tmp_path / "d.csv"), "--target", "diagnosis", "--task", "classification",
            "--score", "log-loss", "--nodes", "20,60", "--ridge", "1e-6,1e-2", "--folds", "3",
            "-o", str(tmp_path / "s.ncast"), "--report", str(tmp_path / "r.json")]
    assert main(args) in (0, None)
    report = json.loads((tmp_path / "r.json").read_text())
    chosen = report["chosen"]
    assert report["scoring"] == "log-loss" and len(report["points"]) == 4
    assert main(["train", str(tmp_path / "d.csv"), "--target", "diagnosis", "--task",
                 "classification", "--nodes", str(chosen["n_nodes"]), "--ridge",
                 repr(chosen["ridge"]), "--neighbors", "default", "--slope-scale",
                 repr(chosen["slope_scale"]), "-o", str(tmp_path / "t.ncast")]) in (0, None)
    selected, trained = load(tmp_path / "s.ncast"), load(tmp_path / "t.ncast")
    assert np.array_equal(selected.network.output_weights, trained.network.output_weights)
    assert selected.network.target_names == ("benign", "malignant")
    assert selected.metadata["metrics"]["cross_validation"]["mean"] == pytest.approx(chosen["mean"])


def test_cli_select_classification_refuses_a_precision_budget(tmp_path, capsys):
    from nodecast.cli import main

    (tmp_path / "d.csv").write_text("a,b\n" + "".join(f"{i},{i % 2}\n" for i in range(30)))
    with pytest.raises(SystemExit) as done:
        main(["select", str(tmp_path / "d.csv"), "--target", "b", "--task", "classification",
              "--precision", "float32", "-o", str(tmp_path / "s.ncast")])
    assert done.value.code == 2 and "are for regression" in capsys.readouterr().err

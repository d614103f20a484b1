"""The scikit-learn estimators: classification with original labels, scores, multi-output, the
declared domain, the automatic ridge, node ranges, and parameter validation."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import reference
from nodecast.trainer import RandomNodeClassifier, RandomNodeRegressor, ridge_choice, to_bundle


@pytest.fixture(scope="module")
def iris():
    # Fisher's iris data as shipped with scikit-learn (sklearn.datasets.load_iris)
    from sklearn.datasets import load_iris

    data = load_iris()
    names = np.array(["setosa", "versicolor", "virginica"], dtype=object)
    return data.data, names[data.target]


def test_classifier_keeps_string_labels_and_predicts_the_highest_score(iris):
    X, labels = iris
    model = RandomNodeClassifier(n_nodes=60, random_state=0).fit(X, labels)
    assert list(model.classes_) == ["setosa", "versicolor", "virginica"]
    predicted = model.predict(X)
    assert predicted.dtype == object and set(predicted) <= set(model.classes_)
    scores = model.class_scores(X)
    assert scores.shape == (150, 3)
    assert np.array_equal(predicted, model.classes_[np.argmax(scores, axis=1)])
    assert np.mean(predicted == labels) > 0.95
    assert np.array_equal(model.decision_function(X), scores)


def test_class_scores_sum_to_one_but_are_not_probabilities(iris):
    # Least squares onto one-hot indicators with an unpenalised bias is linear in the targets,
    # and the indicators sum to 1 in every row, so the scores do too; single scores leave [0, 1].
    X, labels = iris
    model = RandomNodeClassifier(n_nodes=100, ridge=1e-8, random_state=1).fit(X, labels)
    rng = np.random.default_rng(0)
    probes = X.min(axis=0) + rng.random((500, 4)) * np.ptp(X, axis=0)
    scores = model.class_scores(probes)
    assert np.allclose(scores.sum(axis=1), 1.0, atol=1e-8)
    assert scores.min() < 0.0 or scores.max() > 1.0


def test_binary_decision_function_is_the_score_difference():
    rng = np.random.default_rng(1)
    X = rng.random((200, 2))
    y = np.where(X[:, 0] + X[:, 1] > 1, "hot", "cold")
    model = RandomNodeClassifier(n_nodes=30, random_state=0).fit(X, y)
    scores = model.class_scores(X)
    assert np.allclose(model.decision_function(X), scores[:, 1] - scores[:, 0])
    assert np.array_equal(model.predict(X) == "hot", model.decision_function(X) > 0)


def test_one_class_and_one_sample_are_refused_with_the_words_scikit_learn_expects():
    X = np.random.default_rng(2).random((10, 2))
    with pytest.raises(ValueError, match="1 class"):
        RandomNodeClassifier().fit(X, ["a"] * 10)
    with pytest.raises(ValueError, match="n_samples = 1"):
        RandomNodeRegressor().fit(X[:1], [1.0])


def test_regressor_takes_one_or_several_targets():
    rng = np.random.default_rng(3)
    X = rng.random((300, 3))
    Y = np.column_stack([np.sin(3 * X[:, 0]), 10.0 + 100.0 * X[:, 1] * X[:, 2]])
    two = RandomNodeRegressor(n_nodes=60, random_state=0).fit(X, Y)
    assert two.predict(X).shape == (300, 2) and two.coef_.shape == (60, 2)
    one = RandomNodeRegressor(n_nodes=60, random_state=0).fit(X, Y[:, 1])
    assert one.predict(X).shape == (300,)
    relative = np.sqrt(np.mean((two.predict(X) - Y) ** 2, axis=0)) / np.ptp(Y, axis=0)
    assert np.all(relative < 0.02)


def test_rows_outside_a_declared_domain_are_counted_and_still_fitted():
    rng = np.random.default_rng(4)
    X = rng.random((400, 2)) * 10.0
    y = X[:, 0] + np.sin(X[:, 1])
    domain = (np.array([0.0, 0.0]), np.array([8.0, 10.0]))
    model = RandomNodeRegressor(n_nodes=40, domain=domain, random_state=0).fit(X, y)
    assert model.diagnostics_["rows_outside_domain"] == int(np.sum(X[:, 0] > 8.0))
    assert np.array_equal(model.domain_high_, [8.0, 10.0])
    assert np.allclose(model.input_scale_, [8.0, 10.0])
    # the rows beyond x0 = 8 took part in the fit: the model follows them there far better than
    # the same model fitted without them
    outside = X[:, 0] > 8.0
    without = RandomNodeRegressor(n_nodes=40, domain=domain, random_state=0).fit(X[~outside],
                                                                                y[~outside])
    error = lambda m: np.sqrt(np.mean((m.predict(X[outside]) - y[outside]) ** 2))  # noqa: E731
    assert error(model) < 0.5 * error(without)


def test_automatic_ridge_is_on_the_grid_and_reproduced_by_giving_it():
    from sklearn.datasets import make_friedman1  # Friedman (1991)

    X, y = make_friedman1(800, n_features=5, noise=1.0, random_state=0)
    auto = RandomNodeRegressor(n_nodes=80, random_state=0).fit(X, y)
    assert auto.ridge_ in ridge_choice.GRID and auto.ridge_choice_["rule"] == "gcv+heldout+float32"
    assert auto.ridge_ >= min(auto.ridge_choice_["gcv_minimum"], auto.ridge_choice_["heldout_minimum"])
    # with k and s chosen too (the search of k and s at a given ridge scores by that ridge, so it
    # may choose other k and s: layer_choice's rule), giving all three reproduces the model
    given = RandomNodeRegressor(n_nodes=80, ridge=auto.ridge_, random_state=0,
                                n_neighbors=auto.diagnostics_["neighbors"],
                                slope_scale=auto.slope_scale_).fit(X, y)
    assert np.array_equal(given.coef_, auto.coef_) and given.ridge_choice_ == {"rule": "given"}
    assert to_bundle(auto).metadata["ridge"]["value"] == auto.ridge_


def test_gcv_score_equals_the_leave_one_out_shortcut_it_approximates_on_a_large_sample():
    # GCV (Golub, Heath and Wahba 1979) replaces the leverages of the exact leave-one-out
    # shortcut by their mean; for many rows and few nodes the two agree closely.
    from nodecast.trainer import solvers

    rng = np.random.default_rng(5)
    H = np.tanh(rng.standard_normal((3000, 15)))
    y = H[:, :3].sum(axis=1, keepdims=True) + 0.3 * rng.standard_normal((3000, 1))
    factor = solvers.accumulate([(H, y)])
    ridge = 1e-2
    beta, bias = solvers.solve(factor, ridge)
    design = np.column_stack([np.ones(3000), H])
    penalty = ridge * np.diag([0.0] + [1.0] * 15)
    leverage = np.einsum("ij,ji->i", design, np.linalg.solve(design.T @ design + penalty, design.T))
    residual = (y - H @ beta - bias)[:, 0]
    loo = np.mean((residual / (1.0 - leverage)) ** 2)
    gcv = ridge_choice.gcv_score(ridge_choice.spectrum(factor), ridge)
    assert gcv == pytest.approx(loo, rel=0.01)


def test_training_ranges_are_the_pre_activation_extremes_over_the_rows():
    rng = np.random.default_rng(6)
    X = rng.random((5000, 3)) * [1.0, 50.0, 3.0]
    y = X[:, 0] * X[:, 1] + X[:, 2]
    model = RandomNodeRegressor(n_nodes=70, random_state=0).fit(X, y)
    Z = reference.hidden_layer(to_bundle(model).network, X)
    assert np.allclose(model.training_z_low_, Z.min(axis=0), rtol=0, atol=1e-12)
    assert np.allclose(model.training_z_high_, Z.max(axis=0), rtol=0, atol=1e-12)


def test_predictions_equal_the_reference_of_the_exported_network():
    rng = np.random.default_rng(7)
    X = rng.random((400, 2))
    model = RandomNodeRegressor(n_nodes=50, activation="tanh", random_state=0).fit(X, X[:, 0] ** 2)
    ours = model.predict(X)
    theirs = reference.predict(to_bundle(model).network, X)[:, 0]
    assert np.max(np.abs(ours - theirs)) <= 1e-12 * np.max(np.abs(theirs))


@pytest.mark.parametrize("params, word", [
    ({"n_nodes": 0}, "n_nodes"), ({"n_nodes": 2.5}, "n_nodes"), ({"ridge": -1.0}, "ridge"),
    ({"ridge": "big"}, "ridge"), ({"method": "grid"}, "method"), ({"slope_scale": 0.0}, "slope_scale"),
    ({"activation": "relu"}, "activation"), ({"n_neighbors": 0}, "n_neighbors"),
    ({"interval": float("nan")}, "interval"),
    ({"domain": ([0.0], [1.0])}, "domain"), ({"domain": ([0.0, 1.0], [1.0, 0.0])}, "domain")])
def test_bad_parameters_are_refused_naming_the_parameter(params, word):
    X = np.random.default_rng(8).random((30, 2))
    with pytest.raises(ValueError, match=word):
        RandomNodeRegressor(**params).fit(X, X[:, 0])


def test_more_nodes_than_memory_allows_are_refused_with_the_estimate(monkeypatch):
    from nodecast.trainer import memory

    monkeypatch.setattr(memory, "available_memory_bytes", lambda: 10 * 2**20)
    X = np.random.default_rng(9).random((100, 2))
    with pytest.raises(ValueError, match=r"nodes need about .* GiB"):
        RandomNodeRegressor(n_nodes=5000).fit(X, X[:, 0])
    # 5001^2 float64 matrices alone are 200 MB each: the estimate counts six of them
    assert memory.fit_memory_bytes(100, 2, 5000, 1) > 6 * 8 * 5001**2


def test_the_memory_estimate_counts_the_check_rows_of_the_fraction_given(monkeypatch):
    from nodecast.trainer import memory

    # 30,000 rows: a fraction of 0.5 holds out 15,000 check rows, 0.2 holds 6,000 (both under the
    # 20,000 cap); their hidden outputs are kept in three copies of 501 numbers a row
    wide, narrow = (memory.fit_memory_bytes(30_000, 5, 500, 1, f) for f in (0.5, 0.2))
    assert wide - narrow == 8 * 3 * (15_000 - 6_000) * 501
    asked = []
    monkeypatch.setattr(memory, "fit_memory_bytes", lambda *args: asked.append(args) or 0)
    X = np.random.default_rng(9).random((300, 2))
    RandomNodeRegressor(n_nodes=20, check_fraction=0.4, random_state=0).fit(X, X[:, 0])
    assert asked == [(300, 2, 20, 1, 0.4)]

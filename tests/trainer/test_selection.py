"""The fast k-fold search: same numbers as refitting every split from scratch, no leak of
validation rows, deterministic for any n_jobs, and a refit identical to a plain fit."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.compiler.errors import NodecastError
from nodecast.trainer import RandomNodeRegressor, select
from nodecast.trainer.cv_units import UnitSettings, evaluate_unit
from nodecast.trainer.folds import draw_layer, fold_indices, row_folds, split_data
from nodecast.trainer.method_grid import LayerSpec

SEED = 3
GRID = dict(nodes=[15, 40], neighbors=[12, 30], slope_scales=[0.5, 1.0], ridges=[0.0, 1e-8, 1e-4])


@pytest.fixture(scope="module")
def friedman():
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    return make_friedman1(n_samples=300, n_features=6, noise=0.5, random_state=SEED)


@pytest.fixture(scope="module")
def search(friedman):
    X, y = friedman
    return select(X, y, folds=3, seed=SEED, **GRID)


@pytest.fixture(scope="module")
def gridsearch(friedman):
    """scikit-learn's GridSearchCV over the same grid and splits: every split refitted from
    scratch with our estimator (the reference the reuse path must reproduce)."""
    from sklearn.model_selection import GridSearchCV

    X, y = friedman
    grid = {"n_nodes": GRID["nodes"], "n_neighbors": GRID["neighbors"],
            "slope_scale": GRID["slope_scales"], "ridge": GRID["ridges"]}
    return GridSearchCV(RandomNodeRegressor(random_state=SEED), grid, cv=fold_indices(X, 3, SEED),
                        scoring="neg_root_mean_squared_error", refit=False).fit(X, y)


def _relative_differences(search, gridsearch) -> dict[float, float]:
    ours = {(p.nodes, p.neighbors, p.slope_scale, p.ridge): p for p in search.points}
    worst: dict[float, float] = {}
    results = gridsearch.cv_results_
    for i, params in enumerate(results["params"]):
        point = ours[(params["n_nodes"], params["n_neighbors"], params["slope_scale"],
                      params["ridge"])]
        theirs = np.array([-results[f"split{f}_test_score"][i] for f in range(3)])
        rel = float(np.max(np.abs(np.array(point.fold_rmse)[:, 0] - theirs) / theirs))
        worst[params["ridge"]] = max(worst.get(params["ridge"], 0.0), rel)
    return worst


@pytest.mark.slow
def test_reuse_path_matches_refitting_every_split(search, gridsearch):
    worst = _relative_differences(search, gridsearch)
    assert len(search.points) == 24
    assert worst[1e-8] <= 1e-8 and worst[1e-4] <= 1e-8, worst
    # lambda = 0: the triangular solve of a well-conditioned prefix versus the estimator's SVD
    # solver; measured agreement on this grid is about 1e-13 relative.
    assert worst[0.0] <= 1e-8, worst


def test_chosen_point_is_gridsearch_best(search, gridsearch):
    best = gridsearch.best_params_
    assert search.chosen.params == {"n_nodes": best["n_nodes"], "method": "data-driven",
                                    "n_neighbors": best["n_neighbors"],
                                    "slope_scale": best["slope_scale"], "ridge": best["ridge"]}
    assert search.chosen.rmse_mean[0] == pytest.approx(-gridsearch.best_score_, rel=1e-8)


def test_mean_and_spread_are_those_of_the_folds(search):
    for point in search.points[:5]:
        folds = np.array(point.fold_rmse)[:, 0]
        assert point.rmse_mean[0] == pytest.approx(folds.mean(), rel=1e-12)
        assert point.rmse_std[0] == pytest.approx(folds.std(ddof=1), rel=1e-12)


def test_refit_is_the_plain_fit_of_the_chosen_options(friedman, search):
    X, y = friedman
    plain = RandomNodeRegressor(random_state=SEED, domain=(X.min(axis=0), X.max(axis=0)),
                                **search.chosen.params).fit(X, y)
    for name in ("hidden_weights_", "hidden_biases_", "coef_", "intercept_"):
        assert np.array_equal(getattr(search.model, name), getattr(plain, name)), name


def test_smaller_m_are_the_first_nodes_of_one_draw(friedman):
    # The reuse path scores the first M of max(M) nodes as the M-node model; that holds because
    # the generator's draw of M nodes is the prefix of its draw of more nodes (same seed).
    X, y = friedman
    train, valid = fold_indices(X, 3, SEED)[0]
    data = split_data(X, y[:, None], train, valid, np.full(6, np.nan), np.full(6, np.nan))
    big = draw_layer(data.U_train, data.T_train, 40, SEED, "logistic", 12, 1.0)
    small = draw_layer(data.U_train, data.T_train, 15, SEED, "logistic", 12, 1.0)
    assert np.array_equal(big.weights[:15], small.weights)
    assert np.array_equal(big.biases[:15], small.biases)


def test_validation_rows_never_shape_their_own_model(friedman):
    # Move fold 0's validation rows far outside the training box: a leak through the
    # normalisation, the neighbours or the output layer would change the scores on them.
    X, y = friedman
    X, Y = X.copy(), y[:, None].copy()
    train, valid = fold_indices(X, 3, SEED)[0]
    X[valid] = 3.0 * X[valid] + 1.0
    Y[valid] = -Y[valid]
    declared = (np.full(6, np.nan), np.full(6, np.nan))
    settings = UnitSettings(LayerSpec("data-driven", (("n_neighbors", 12), ("slope_scale", 1.0))),
                            (15, 40), (1e-6,), SEED)
    unit = evaluate_unit(X, Y, (train, valid), declared, settings)
    scratch = RandomNodeRegressor(n_nodes=40, n_neighbors=12, slope_scale=1.0, ridge=1e-6,
                                  random_state=SEED)
    scratch.fit(X[train], Y[train, 0])
    expected = np.sqrt(np.mean((scratch.predict(X[valid]) - Y[valid, 0]) ** 2))
    assert unit.rmse[0, 1, 0] == pytest.approx(expected, rel=1e-9)


@pytest.mark.slow
def test_result_does_not_depend_on_n_jobs(friedman):
    X, y = friedman
    small = dict(nodes=[10, 30], neighbors=[12, 20], ridges=[0.0, 1e-6])
    one = select(X, y, folds=3, seed=1, n_jobs=1, **small)
    two = select(X, y, folds=3, seed=1, n_jobs=2, **small)
    assert json.dumps(one.as_dict()) == json.dumps(two.as_dict())


def test_progress_reports_every_unit(friedman):
    X, y = friedman
    calls = []
    select(X, y, nodes=[10], neighbors=[12, 20], ridges=[1e-6], folds=3,
           progress=lambda done, total: calls.append((done, total)))
    assert calls == [(i, 6) for i in range(1, 7)]


def test_folds_partition_the_rows_by_a_hash_of_their_inputs():
    X = np.random.default_rng(7).uniform(size=(1000, 3))
    X[500:600] = X[0]  # a hundred copies of row 0
    splits = fold_indices(X, 10, 7)
    valid = np.concatenate([v for _, v in splits])
    assert np.array_equal(np.sort(valid), np.arange(1000))
    for train, v in splits:
        assert np.intersect1d(train, v).size == 0 and train.size + v.size == 1000
        assert (0 in v) == np.isin(np.arange(500, 600), v).all()  # copies share a fold
    sizes = np.array([len(v) for _, v in splits]) - 99 * np.array([0 in v for _, v in splits])
    assert sizes.min() >= 60 and sizes.max() <= 140  # about 90 each (multinomial)
    # a row's fold depends on the row alone: shuffled or cut into pieces, the same folds
    order = np.random.default_rng(1).permutation(1000)
    assert np.array_equal(row_folds(X[order], 10, 7), row_folds(X, 10, 7)[order])
    assert not np.array_equal(row_folds(X, 10, 8), row_folds(X, 10, 7))


def test_tiny_data_with_an_empty_fold_is_one_clear_error():
    X = np.repeat(np.arange(3.0)[:, None], 4, axis=0)  # 12 rows, 3 distinct
    with pytest.raises(NodecastError, match=r"^fold \d+ of 10 gets 0 of the 12 rows.*fewer --folds"):
        fold_indices(X, 10, 0)


@pytest.mark.parametrize("bad, message", [
    (dict(nodes=[0]), "nodes"), (dict(ridges=[-1.0]), "ridges"),
    (dict(neighbors=[2.5]), "neighbors"),
    (dict(slope_scales=[]), "slope-scales"), (dict(folds=1), "folds"),
    (dict(tolerance=1e-3), "tolerance"),
])
def test_bad_settings_are_one_clear_error(friedman, bad, message):
    X, y = friedman
    settings = dict(nodes=[10], neighbors=[12], ridges=[1e-6], folds=3) | bad
    with pytest.raises(NodecastError, match=message):
        select(X, y, **settings)


def test_several_targets_are_scored_each_and_ranked_together(friedman):
    X, y = friedman
    Y = np.column_stack([y, 100.0 * np.sin(3 * X[:, 0])])  # second target on another scale
    result = select(X, Y, nodes=[10, 30], neighbors=[12], ridges=[1e-6], folds=3)
    assert all(len(p.rmse_mean) == 2 for p in result.points)
    span = Y.max(axis=0) - Y.min(axis=0)
    for p in result.points:
        assert p.score == pytest.approx(np.mean(np.array(p.rmse_mean) / span), rel=1e-12)
    assert result.model.predict(X).shape == (300, 2)

"""The default ridge's held-out check: the shortcut predictions equal refits (and scikit-learn's
Ridge), duplicated rows stay on one side, and the rule rescues data where GCV alone fails."""

from __future__ import annotations

import numpy as np
from sklearn.utils import check_random_state

from nodecast.trainer import RandomNodeRegressor, ridge_choice, solvers
from tests.helpers import workshop_log


def test_heldout_errors_equal_refits_and_sklearn_ridge():
    # the error of every grid lambda comes from one SVD of the fit rows' factor; compare with
    # nodecast's own solver and with sklearn.linear_model.Ridge (alpha = lambda, intercept free)
    from sklearn.linear_model import Ridge

    rng = np.random.default_rng(0)
    H, T = rng.random((300, 25)), rng.random((300, 2))
    H[:, 1] = H[:, 0] + 1e-9 * rng.random(300)  # nearly duplicated node
    rows = np.arange(300) % 5 == 0
    rest = solvers.accumulate([(H[~rows], T[~rows])])
    design = np.column_stack([np.ones(rows.sum()), H[rows]])
    errors = ridge_choice.heldout_squared_errors(ridge_choice.HeldOut(rest, design, T[rows]))
    for index in (0, 6, 12, 20):
        ridge = float(ridge_choice.GRID[index])
        beta, bias = solvers.solve(rest, ridge)
        refit = np.sum((H[rows] @ beta + bias - T[rows]) ** 2, axis=1)
        assert np.allclose(errors[index], refit, rtol=1e-7, atol=1e-12)
        if ridge >= 1e-4:  # Ridge's solvers square the condition number below that
            sk = Ridge(alpha=ridge, solver="svd").fit(H[~rows], T[~rows]).predict(H[rows])
            assert np.allclose(errors[index], np.sum((sk - T[rows]) ** 2, axis=1), rtol=1e-6)


def test_check_rows_keep_copies_of_a_row_together_and_need_enough_rows():
    U = np.repeat(np.random.default_rng(1).random((100, 3)), 3, axis=0)
    checked = ridge_choice.check_rows(U, check_random_state(0))
    rows = np.flatnonzero(checked.mask(U))
    # each of the 100 distinct rows is drawn with probability 0.2 (a hash of its values):
    # 20 +- 4 of them (binomial standard deviation), here 3 copies each
    assert 36 <= rows.size <= 84 and rows.size % 3 == 0
    held = {tuple(u) for u in U[rows]}
    assert not any(tuple(u) in held for u in np.delete(U, rows, axis=0))
    # the choice of a row depends on the row alone: the same rows from any slice of the data
    assert np.array_equal(checked.mask(U[150:]), checked.mask(U)[150:])
    assert ridge_choice.check_rows(U[:90], check_random_state(0)) is None  # 18 < 20 check rows


def test_check_rows_cover_the_fraction_and_differ_by_seed():
    U = np.random.default_rng(2).random((20_000, 4))
    first, second = (ridge_choice.check_rows(U, check_random_state(s)) for s in (0, 1))
    share = first.mask(U).mean()
    assert abs(share - 0.2) < 4 * np.sqrt(0.2 * 0.8 / U.shape[0])  # binomial, 4 sigma
    assert np.mean(first.mask(U) == second.mask(U)) < 0.75  # independent draws agree on 0.68



def test_default_model_on_duplicated_discrete_rows_is_as_good_as_ridgecv():
    # GCV alone picked lambda 3e-8 here (test RMSE 2.44 against noise 0.5); with the check the
    # default model is within 10% of scikit-learn's RidgeCV (a linear model is right for this
    # target) on fresh rows
    from sklearn.linear_model import RidgeCV

    X, y = workshop_log(600, 0)
    X_test, y_test = workshop_log(900, 5)
    model = RandomNodeRegressor(random_state=0).fit(X, y)
    ours = np.sqrt(np.mean((model.predict(X_test) - y_test) ** 2))
    linear = np.sqrt(np.mean((RidgeCV().fit(X, y).predict(X_test) - y_test) ** 2))
    assert ours <= 1.1 * linear, (ours, linear, model.ridge_choice_)
    assert model.ridge_choice_["rule"] == "gcv+heldout+float32"


def test_too_few_rows_fall_back_to_gcv_alone():
    rng = np.random.default_rng(2)
    X = rng.random((60, 2))
    model = RandomNodeRegressor(n_nodes=20, random_state=0).fit(X, X[:, 0] ** 2)
    assert model.ridge_choice_["rule"] == "gcv+float32"


def test_train_notes_heavy_tailed_inputs_in_one_line(tmp_path, capsys):
    from nodecast.cli import main
    from nodecast.compiler.csvio import write_table

    rng = np.random.default_rng(4)
    flow = np.exp(rng.normal(0, 2.0, 400))  # log-normal: a few rows set the range
    level = rng.random(400)
    rows = np.column_stack([flow, level, np.log(flow) + level]).tolist()
    (tmp_path / "pump.csv").write_text(write_table(["flow", "level", "y"], rows))
    assert main(["train", str(tmp_path / "pump.csv"), "--target", "y", "--nodes", "30", "-o",
                 str(tmp_path / "m.ncast")]) in (0, None)
    lines = capsys.readouterr().err.splitlines()
    notes = [line for line in lines if line.startswith("note: heavy-tailed")]
    assert len(notes) == 1 and "'flow'" in notes[0] and "'level'" not in notes[0]


def test_heldout_figures_are_a_refit_on_the_other_rows_scored_on_the_check_rows():
    # reference: scikit-learn's Ridge (alpha = lambda, intercept free) on the model's own hidden
    # outputs of the rows outside the check set, scored on the check rows in target units
    from sklearn.datasets import make_friedman1  # Friedman (1991)
    from sklearn.linear_model import Ridge

    X, y = make_friedman1(600, n_features=5, noise=0.5, random_state=1)
    model = RandomNodeRegressor(n_nodes=40, n_neighbors=12, slope_scale=1.0, ridge=1e-2,
                                random_state=2).fit(X, y)
    U = (X - model.input_offset_) / model.input_scale_
    H = 1 / (1 + np.exp(-(U @ model.hidden_weights_.T + model.hidden_biases_)))
    T = (y - model.output_offset_[0]) / model.output_scale_[0]
    rng = check_random_state(2)
    rng.randint(2**31 - 1, size=3)  # the draws of the data-driven layer come first
    rows = ridge_choice.check_rows(U, rng).mask(U)
    predicted = Ridge(alpha=1e-2, solver="svd").fit(H[~rows], T[~rows]).predict(H[rows])
    error = (predicted - T[rows]) * model.output_scale_[0]
    figures = model.heldout_figures_
    assert figures["rows"] == rows.sum()
    assert np.isclose(figures["rmse"][0], np.sqrt(np.mean(error**2)), rtol=1e-8)
    assert np.isclose(figures["max_abs_error"][0], np.max(np.abs(error)), rtol=1e-8)
    assert RandomNodeRegressor(n_nodes=40, check_fraction=0.0, random_state=2).fit(
        X, y).heldout_figures_ is None

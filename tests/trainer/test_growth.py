"""Constructive growth: the batch rule, the patience, agreement with the grid's prefixes when every
batch is kept, and a final model drawn from all rows with the same batches."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler.errors import NodecastError
from nodecast.trainer import select, to_bundle
from nodecast.trainer.folds import draw_layer, hidden_outputs
from nodecast.trainer.growth import GrowthSettings


@pytest.fixture(scope="module")
def friedman():
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    return make_friedman1(n_samples=360, n_features=5, noise=0.5, random_state=8)


@pytest.fixture(scope="module")
def grown(friedman):
    X, y = friedman
    return select(X, y, nodes=[10, 20, 30, 40, 50], neighbors=[15], ridges=[1e-6], folds=3,
                  grow=GrowthSettings(batch=10, threshold=0.01, patience=2, pool=200))


def test_kept_batches_lower_the_error_by_more_than_the_threshold(grown):
    curve, threshold = grown.growth.curve, grown.growth.settings.threshold
    current = grown.growth.base["score"]
    for record in curve:
        assert record["kept"] == (record["score"] < current * (1 - threshold))
        if record["kept"]:
            current = record["score"]
    assert grown.growth.kept_batches == tuple(r["batch"] for r in curve if r["kept"])


def test_growth_stops_after_the_patience(grown):
    kept = [r["kept"] for r in grown.growth.curve]
    pool_spent = len(kept) == grown.growth.settings.pool // grown.growth.settings.batch
    trailing = len(kept) - (max(i for i, k in enumerate(kept) if k) + 1)
    assert not pool_spent and trailing == grown.growth.settings.patience


def test_while_every_batch_is_kept_growth_equals_the_grid_prefixes(grown):
    # Appending batches by block Gram-Schmidt must give the same fold models as the grid's
    # prefixes of one factorisation: the first batches are consecutive nodes of the same pool.
    grid = {p.nodes: p.rmse_mean[0] for p in grown.points}
    leading = []
    for record in grown.growth.curve:
        if not record["kept"]:
            break
        leading.append(record)
    assert len(leading) >= 3
    for record in leading:
        if record["nodes"] in grid:
            assert record["rmse_mean"][0] == pytest.approx(grid[record["nodes"]], rel=1e-8)


def test_final_model_keeps_the_same_batches_of_the_full_data_pool(friedman, grown):
    X, y = friedman
    model = grown.model
    columns = list(grown.growth.kept_columns())
    assert model.n_nodes == len(columns) == model.hidden_weights_.shape[0]
    U = (X - model.input_offset_) / model.input_scale_
    T = (y[:, None] - model.output_offset_) / model.output_scale_
    pool = draw_layer(U, T, 200, 0, "logistic", 15, 1.0)
    assert np.array_equal(model.hidden_weights_, pool.weights[columns])
    # the output layer is the least-squares fit of the kept nodes (numpy.linalg.lstsq reference)
    H = hidden_outputs(pool, U, "logistic")[:, columns]
    design = np.hstack([np.ones((X.shape[0], 1)), H])
    ridge_rows = np.hstack([np.zeros((len(columns), 1)), np.sqrt(1e-6) * np.eye(len(columns))])
    solution, *_ = np.linalg.lstsq(np.vstack([design, ridge_rows]),
                                   np.vstack([T, np.zeros((len(columns), 1))]), rcond=None)
    assert np.allclose(model.coef_[:, 0], solution[1:, 0], rtol=1e-6, atol=1e-8)
    bundle = to_bundle(model)
    assert bundle.network.n_nodes == len(columns)


def test_growth_that_keeps_nothing_is_a_clear_error(friedman):
    X, y = friedman
    with pytest.raises(NodecastError, match="growth kept no batch"):
        select(X, y, nodes=[10], neighbors=[15], ridges=[1e-6], folds=3,
               grow=GrowthSettings(batch=5, threshold=0.99, patience=1, pool=20))


def test_cli_grow_writes_the_curve(friedman, tmp_path):
    import json

    from nodecast.cli import main

    X, y = friedman
    lines = ["a,b,c,d,e,out"] + [",".join(repr(float(v)) for v in row)
                                 for row in np.column_stack([X, y])]
    (tmp_path / "d.csv").write_text("\n".join(lines) + "\n")
    main(["select", str(tmp_path / "d.csv"), "--target", "out", "--nodes", "10,20",
          "--neighbors", "15", "--ridge", "1e-6", "--folds", "3", "--grow", "--grow-batch", "10",
          "--grow-pool", "60", "-o", str(tmp_path / "g.ncast"), "--report", str(tmp_path / "g.json"),
          "--plot", str(tmp_path / "g.png")])
    report = json.loads((tmp_path / "g.json").read_text())
    assert report["growth"]["curve"] and report["growth"]["pool"] == 60
    from nodecast.compiler import load

    bundle = load(tmp_path / "g.ncast")
    assert bundle.network.n_nodes == report["growth"]["nodes"]
    assert bundle.metadata["selection"]["grown"] is True

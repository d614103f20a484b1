"""One-hot encoders in scikit-learn Pipelines map onto the IR's categorical inputs, and
``select --categorical`` trains with them.

Outside reference: scikit-learn's own ``Pipeline.predict``, including its OneHotEncoder's
``handle_unknown="ignore"`` (an unknown category is an all-zero one-hot row), on the diabetes data
shipped with scikit-learn (Efron et al. 2004).
"""

from __future__ import annotations

import csv
import io
import subprocess
import sys

import numpy as np
import pytest

from nodecast.compiler import load, reference
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.levels import codes
from nodecast.trainer import RandomNodeRegressor, export, to_bundle

pd = pytest.importorskip("pandas")


@pytest.fixture(scope="module")
def frame():
    from sklearn.datasets import load_diabetes

    data = load_diabetes(as_frame=True, scaled=False).frame
    data["sex"] = np.where(data["sex"] == 1, "first", "second")  # levels as text
    rng = np.random.default_rng(0)
    data["site"] = rng.choice(["north", "south", "west"], len(data))  # an invented second category
    return data.drop(columns="target"), data["target"].to_numpy()


def _pipeline(encoder, X, y, **scaler):
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    numeric = [c for c in X.columns if c not in ("sex", "site")]
    stage = ColumnTransformer([("num", StandardScaler(**scaler), numeric),
                               ("cat", encoder, ["site", "sex"])])
    return make_pipeline(stage, RandomNodeRegressor(n_nodes=60, random_state=0)).fit(X, y)


def _rows(net, X):
    numbers = X[list(net.feature_names)].to_numpy(dtype=float)
    return np.column_stack([numbers] + [codes(X[name].astype(str), levels) for name, levels in
                                         zip(net.categorical_names, net.categorical_levels,
                                             strict=True)])


@pytest.mark.parametrize("options", [{}, {"drop": "first"}, {"drop": "if_binary"}])
def test_one_hot_pipeline_predicts_what_the_pipeline_predicts(frame, options):
    from sklearn.preprocessing import OneHotEncoder

    X, y = frame
    pipeline = _pipeline(OneHotEncoder(sparse_output=False, **options), X, y)
    net = to_bundle(pipeline).network
    # categorical inputs in the frame's column order, levels in the encoder's order
    assert net.categorical_names == ("sex", "site")
    assert net.categorical_levels == (("first", "second"), ("north", "south", "west"))
    want = pipeline.predict(X)
    got = reference.predict(net, _rows(net, X))[:, 0]
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(want)


def test_unknown_category_under_pass_is_sklearns_ignored_category(frame):
    from sklearn.preprocessing import OneHotEncoder

    X, y = frame
    pipeline = _pipeline(OneHotEncoder(sparse_output=False, handle_unknown="ignore"), X, y)
    net = to_bundle(pipeline).network
    strange = X.head(10).copy()
    strange["site"] = "east"  # never seen in training
    want = pipeline.predict(strange)
    rows = _rows(net, strange)
    assert np.all(rows[:, -1] == -1)  # site is the last categorical input
    got = reference.predict(net, rows, "pass")[:, 0]
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(pipeline.predict(X))


def test_python_predictor_from_a_pipeline_reads_category_text(frame, tmp_path):
    from sklearn.preprocessing import OneHotEncoder

    X, y = frame
    pipeline = _pipeline(OneHotEncoder(sparse_output=False), X, y)
    path = tmp_path / "predictor.py"
    export(pipeline, "python", path, target_names=["progression"])
    X.head(30).to_csv(tmp_path / "rows.csv", index=False)
    done = subprocess.run([sys.executable, "-I", "-S", str(path), str(tmp_path / "rows.csv")],
                          capture_output=True, text=True, check=True)
    got = np.array([float(r[0]) for r in list(csv.reader(io.StringIO(done.stdout)))[1:]])
    want = pipeline.predict(X.head(30))
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(pipeline.predict(X))


def test_unsupported_encoders_are_refused(frame):
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    X, y = frame
    grouped = _pipeline(OneHotEncoder(sparse_output=False, min_frequency=100), X, y)
    with pytest.raises(NodecastError, match="infrequent"):
        to_bundle(grouped)
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import make_pipeline

    twice = ColumnTransformer([("n", StandardScaler(), ["bmi"]),
                               ("c", OneHotEncoder(sparse_output=False), ["sex"]),
                               ("again", "passthrough", ["bmi"])])
    model = make_pipeline(twice, RandomNodeRegressor(n_nodes=10, random_state=0)).fit(X, y)
    with pytest.raises(NodecastError, match="'bmi' feeds more than one"):
        to_bundle(model)


def test_select_takes_categorical_columns(tmp_path):
    from nodecast.cli import main

    rng = np.random.default_rng(3)
    rows = 400
    level = rng.choice(["a", "b", "c"], rows)
    x = rng.random(rows)
    y = np.sin(3 * x) + np.select([level == "a", level == "b"], [0.0, 2.0], -1.0)
    with open(tmp_path / "data.csv", "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["x", "level", "y"])
        writer.writerows([repr(float(a)), b, repr(float(c))] for a, b, c in zip(x, level, y,
                                                                                  strict=True))
    try:
        main(["select", str(tmp_path / "data.csv"), "--target", "y", "--categorical", "level",
              "--nodes", "20,40", "--ridge", "1e-6", "--folds", "3", "-o",
              str(tmp_path / "m.ncast")])
    except SystemExit as exc:
        assert exc.code in (0, None)
    net = load(tmp_path / "m.ncast").network
    assert net.categorical_levels == (("a", "b", "c"),)
    got = reference.predict(net, [[0.5, 0], [0.5, 1], [0.5, 2]])[:, 0]
    assert abs((got[1] - got[0]) - 2.0) < 0.2 and abs((got[2] - got[0]) + 1.0) < 0.2

"""The Python export path: fitted estimators and scikit-learn Pipelines to bundles and artifacts.

Outside references: scikit-learn's own ``Pipeline.predict`` (the object the user fitted) and the
diabetes data shipped with scikit-learn (Efron et al. 2004).
"""

from __future__ import annotations

import csv
import io
import subprocess
import sys

import numpy as np
import pytest

from nodecast.compiler import reference
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.verify import verify
from nodecast.compiler.verify.runners import runner
from nodecast.trainer import RandomNodeClassifier, RandomNodeRegressor, export, to_bundle

pd = pytest.importorskip("pandas")


@pytest.fixture(scope="module")
def diabetes():
    from sklearn.datasets import load_diabetes  # Efron et al. (2004), shipped with scikit-learn

    frame = load_diabetes(as_frame=True, scaled=False).frame
    return frame.drop(columns="target"), frame["target"].to_numpy()


@pytest.fixture(scope="module")
def scaled_pipeline(diabetes):
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, y = diabetes
    return make_pipeline(StandardScaler(), RandomNodeRegressor(n_nodes=80, random_state=0)).fit(X, y)


def _transformers():
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import MaxAbsScaler, MinMaxScaler, StandardScaler

    return {
        "standard": StandardScaler(),
        "min-max": MinMaxScaler(feature_range=(-1, 3)),
        "max-abs": MaxAbsScaler(),
        "standard-no-mean": StandardScaler(with_mean=False),
        "nested": make_pipeline(StandardScaler(), MinMaxScaler()),
        "columns": ColumnTransformer([("std", StandardScaler(), ["bmi", "bp", "s5"]),
                                      ("range", MinMaxScaler(), ["age"]),
                                      ("off", "drop", ["s1", "s2"])], remainder="passthrough"),
        "columns-drop-rest": ColumnTransformer([("abs", MaxAbsScaler(), ["s6", "age"]),
                                                ("keep", "passthrough", ["bmi"])]),
    }


@pytest.mark.parametrize("name", sorted(_transformers()))
def test_folded_input_stage_predicts_what_the_pipeline_predicts(diabetes, name):
    from sklearn.pipeline import make_pipeline

    X, y = diabetes
    pipeline = make_pipeline(_transformers()[name], RandomNodeRegressor(n_nodes=60, random_state=1))
    pipeline.fit(X, y)
    net = to_bundle(pipeline, target_names=["progression"]).network
    assert set(net.feature_names) <= set(X.columns)
    assert list(net.feature_names) == [c for c in X.columns if c in net.feature_names]  # frame order
    got = reference.predict(net, X[list(net.feature_names)].to_numpy())[:, 0]
    want = pipeline.predict(X)
    # the same arithmetic in another order: differences are rounding, far below 1e-10 of the range
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(want)
    low, high = X[list(net.feature_names)].min().to_numpy(), X[list(net.feature_names)].max().to_numpy()
    assert np.allclose(net.domain_low, low, rtol=1e-12, atol=1e-12)
    assert np.allclose(net.domain_high, high, rtol=1e-12, atol=1e-12)


def test_dropped_columns_are_not_inputs(diabetes):
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, y = diabetes
    stage = ColumnTransformer([("std", StandardScaler(), ["bmi", "s5"])], remainder="drop")
    pipeline = make_pipeline(stage, RandomNodeRegressor(n_nodes=30, random_state=0)).fit(X, y)
    assert to_bundle(pipeline).network.feature_names == ("bmi", "s5")


def test_estimator_on_a_frame_keeps_its_column_names_units_and_domain(diabetes):
    X, y = diabetes
    model = RandomNodeRegressor(n_nodes=30, random_state=0).fit(X, y)
    bundle = to_bundle(model, target_names=["progression"], feature_units={"age": "years"},
                       target_units=["1"], domain={"bmi": (15.0, 45.0)})
    net = bundle.network
    assert net.feature_names == tuple(X.columns)
    assert net.feature_units[0] == "years" and set(net.feature_units[1:]) == {""}
    i = net.feature_names.index("bmi")
    assert (net.domain_low[i], net.domain_high[i]) == (15.0, 45.0)
    # the domain is declared, the model is unchanged
    assert np.array_equal(reference.predict(net, X.to_numpy())[:, 0], reference.predict(
        to_bundle(model).network, X.to_numpy())[:, 0])


def test_classifier_pipeline_keeps_its_labels():
    from sklearn.datasets import load_iris  # Fisher (1936), shipped with scikit-learn
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    data = load_iris(as_frame=True)
    labels = np.array(data.target_names, dtype=object)[data.target]
    pipeline = make_pipeline(StandardScaler(), RandomNodeClassifier(n_nodes=40, random_state=0))
    pipeline.fit(data.data, labels)
    net = to_bundle(pipeline).network
    got = reference.predict_labels(net, data.data.to_numpy())
    assert np.array_equal(got, pipeline.predict(data.data))
    assert net.class_labels == ("setosa", "versicolor", "virginica")


@pytest.mark.parametrize("to,options", [("python", {}), ("onnx", {"precision": "float32"}),
                                        ("onnx", {"precision": "float64"}),
                                        ("c", {"precision": "float32"}), ("c", {"precision": "float64"})])
@pytest.mark.slow
def test_every_artifact_agrees_with_pipeline_predict(scaled_pipeline, diabetes, tmp_path, to, options):
    if to == "c":
        import shutil

        if shutil.which("gcc") is None and shutil.which("cc") is None:
            pytest.skip("needs a C compiler")
    X, _ = diabetes
    bundle = to_bundle(scaled_pipeline, target_names=["progression"])
    path = tmp_path / {"python": "predictor.py", "onnx": "model.onnx", "c": "c"}[to]
    export(bundle, to, path, **options)
    rows = X[list(bundle.network.feature_names)].to_numpy()
    report = verify(bundle, path, rows, count=256).as_dict()
    assert report["passed"], report["notes"]
    tolerance = report["tolerance"]["per_output"][0]  # the artifact's stated tolerance
    module = runner(report["artifact"]["kind"])
    info = {**module.describe(path), "engine": report["artifact"]["engines"][0]}
    got = module.run(path, rows, info)[:, 0]
    want = scaled_pipeline.predict(X)
    # the reference differs from scikit-learn's arithmetic by rounding only (see the test above)
    slack = np.max(np.abs(reference.predict(bundle.network, rows)[:, 0] - want))
    assert slack <= 1e-10 * np.ptp(want)
    assert np.max(np.abs(got - want)) <= tolerance + slack


def test_python_predictor_reads_a_csv_with_the_frames_column_names(scaled_pipeline, diabetes,
                                                                    tmp_path):
    X, _ = diabetes
    path = tmp_path / "predictor.py"
    export(scaled_pipeline, "python", path, target_names=["progression"])
    shuffled = X[list(reversed(X.columns))].head(25)  # by header name, in any order
    data = tmp_path / "rows.csv"
    shuffled.to_csv(data, index=False)
    done = subprocess.run([sys.executable, "-I", "-S", str(path), str(data)], capture_output=True,
                          text=True, check=True)
    records = list(csv.reader(io.StringIO(done.stdout)))
    assert records[0] == ["progression"]
    got = np.array([float(row[0]) for row in records[1:]])
    want = scaled_pipeline.predict(shuffled[X.columns])
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(want)  # SPEC: float64 artifacts


def test_unsupported_step_is_refused_in_one_line_and_nothing_is_written(diabetes, tmp_path):
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import PolynomialFeatures, StandardScaler

    X, y = diabetes
    pipeline = make_pipeline(StandardScaler(), PolynomialFeatures(2),
                             RandomNodeRegressor(n_nodes=20, random_state=0)).fit(X, y)
    for to in ("python", "onnx", "c"):
        with pytest.raises(NodecastError) as caught:
            export(pipeline, to, tmp_path / f"out-{to}")
        message = str(caught.value)
        assert "\n" not in message and "'polynomialfeatures' (PolynomialFeatures)" in message
        assert "StandardScaler" in message  # says what is supported
    assert list(tmp_path.iterdir()) == []


def test_pipeline_without_a_nodecast_estimator_is_refused(diabetes):
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import MinMaxScaler, StandardScaler

    X, y = diabetes
    with pytest.raises(NodecastError, match="'ridge' .Ridge.: the last step must be"):
        to_bundle(make_pipeline(StandardScaler(), Ridge()).fit(X, y))
    clipping = make_pipeline(MinMaxScaler(clip=True), RandomNodeRegressor(n_nodes=10)).fit(X, y)
    with pytest.raises(NodecastError, match="'minmaxscaler' .MinMaxScaler. .clip=True"):
        to_bundle(clipping)
    with pytest.raises(NodecastError, match="cannot export a Ridge"):
        to_bundle(Ridge().fit(X, y))

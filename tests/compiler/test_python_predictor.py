"""The generated predictor at work: in an isolated ``python3 -I -S`` (no site-packages, so no NumPy)
and on every Python 3.8+ of the machine, against the float64 reference, on probes and extreme
inputs, under each out-of-domain policy; and through ``verify``."""

from __future__ import annotations

import importlib.util
import math
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nodecast.compiler import NodecastError, emit, reference
from nodecast.compiler.verify import verify
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.runners import python as runner

BIG = np.finfo(np.float64).max
POLICIES = ("clamp", "pass", "reject")


def emit_file(bundle, path, **options):
    emit(bundle, "python", path, **options)
    return path


def load_module(path):
    spec = importlib.util.spec_from_file_location(f"predictor_{abs(hash(str(path)))}", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def predictors(friedman_bundle, classifier_bundle, tmp_path_factory):
    """Predictor files by (model, policy) for the default Friedman regressor and the classifier."""
    folder = tmp_path_factory.mktemp("predictors")
    paths = {}
    for model, bundle in (("friedman", friedman_bundle), ("iris", classifier_bundle)):
        for policy in POLICIES:
            paths[model, policy] = emit_file(bundle, folder / f"{model}_{policy}.py",
                                             out_of_domain=policy)
    return paths


def run_isolated(path, X):
    return runner.run(path, X, runner.describe(path))


def output_range(net):
    inside = np.vstack([f.X for f in probe_families(net, count=1024) if f.inside_domain])
    return np.ptp(reference.predict(net, inside), axis=0)


def assert_matches_reference(net, X, got, policy):
    with np.errstate(over="ignore", invalid="ignore"):  # rejected rows may overflow; unused
        want = reference.predict(net, X, "clamp" if policy == "clamp" else "pass")
    if policy == "reject":
        outside = reference.outside_domain(net, X)
        assert np.all(np.isnan(got[outside])) and not np.any(np.isnan(got[~outside]))
        got, want = got[~outside], want[~outside]
    # SPEC "Numerics": float64 artifacts agree within 1e-10 of the output range
    assert np.all(np.abs(got - want) <= 1e-10 * output_range(net))


def extreme_rows(net, limit):
    """Rows mixing huge, tiny, signed-zero and just-outside values with in-domain ones."""
    rng = np.random.default_rng(4)
    specials = np.array([limit, -limit, 1e15, -1e15, 5e-324, -5e-324, 0.0, -0.0, 1e-300])
    inside = net.domain_low + rng.random((64, net.n_features)) * (net.domain_high - net.domain_low)
    pick = rng.random(inside.shape) < 0.4
    rows = np.where(pick, rng.choice(specials, size=inside.shape), inside)
    edges = np.vstack([np.nextafter(net.domain_low, -BIG), np.nextafter(net.domain_high, BIG)])
    return np.vstack([rows, edges, np.full((1, net.n_features), limit)])


def test_isolated_mode_really_has_no_numpy():
    done = subprocess.run([sys.executable, "-I", "-S", "-c", "import numpy"], capture_output=True)
    assert done.returncode != 0 and b"ModuleNotFoundError" in done.stderr


@pytest.mark.parametrize("policy", POLICIES)
def test_probes_match_reference_in_isolated_python(friedman_bundle, predictors, policy):
    net = friedman_bundle.network
    X = np.vstack([f.X for f in probe_families(net, count=2048, seed=1)])
    assert_matches_reference(net, X, run_isolated(predictors["friedman", policy], X), policy)


@pytest.mark.parametrize("policy", ["clamp", "reject"])
def test_extreme_inputs_match_clamped_reference(friedman_bundle, predictors, policy):
    net = friedman_bundle.network
    X = extreme_rows(net, BIG)
    assert_matches_reference(net, X, run_isolated(predictors["friedman", policy], X), policy)


def test_extreme_inputs_under_pass(friedman_bundle, predictors):
    net = friedman_bundle.network
    moderate = extreme_rows(net, 1e15)
    assert_matches_reference(net, moderate, run_isolated(predictors["friedman", "pass"], moderate),
                             "pass")
    huge = run_isolated(predictors["friedman", "pass"], extreme_rows(net, BIG))  # no error raised
    assert huge.shape == (67, 1) and np.isfinite(huge).mean() > 0.5


@pytest.mark.parametrize("policy", ["clamp", "pass"])
def test_no_finite_input_raises(friedman_bundle, predictors, policy):
    module = load_module(predictors["friedman", policy])
    n = friedman_bundle.network.n_features

    @settings(max_examples=400, deadline=None)
    @given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=n, max_size=n))
    def evaluates(row):
        (value,) = module.predict(row)
        assert isinstance(value, float)
        if policy == "clamp":
            assert math.isfinite(value)

    evaluates()
    assert module.predict([10**400, -(10**400), 0, 0, 0])  # ints beyond float range


def test_reject_raises_one_documented_error_class(friedman_bundle, predictors):
    module = load_module(predictors["friedman", "reject"])
    net = friedman_bundle.network
    inside = list((net.domain_low + net.domain_high) / 2)
    row = inside[:2] + [float(net.domain_high[2]) + 1.0] + inside[3:]
    with pytest.raises(module.OutOfDomainError) as caught:
        module.predict(row)
    assert issubclass(module.OutOfDomainError, ValueError)
    assert (caught.value.feature, caught.value.index, caught.value.row) == ("x2", 2, None)
    with pytest.raises(module.OutOfDomainError, match="row 1: feature 'x2'") as caught:
        module.predict_many([inside, row])
    assert caught.value.row == 1
    with pytest.raises(module.OutOfDomainError):
        module.predict(inside[:4] + [math.nan])


def test_nan_behaviour_is_as_documented(friedman_bundle, classifier_bundle, predictors):
    nan_row = [math.nan] * friedman_bundle.network.n_features
    for policy in ("clamp", "pass"):
        assert math.isnan(load_module(predictors["friedman", policy]).predict(nan_row)[0])
    classifier = load_module(predictors["iris", "pass"])
    iris_nan = np.full((1, classifier_bundle.network.n_features), np.nan)
    # NumPy's argmax returns the first NaN (NumPy docs), which is what the reference labels with
    assert classifier.predict(list(iris_nan[0])) == list(
        reference.predict_labels(classifier_bundle.network, iris_nan))


def test_api_shapes_and_wrong_lengths(friedman_bundle, predictors):
    module = load_module(predictors["friedman", "clamp"])
    row = list(friedman_bundle.network.domain_low)
    assert module.predict(row) == module.predict_scores(row) and len(module.predict(row)) == 1
    assert module.predict_many([row, row]) == [module.predict(row)] * 2
    with pytest.raises(ValueError, match="expected 5 features"):
        module.predict(row[:4])


def test_classifier_scores_and_labels_match_reference(classifier_bundle, predictors):
    net = classifier_bundle.network
    X = np.vstack([f.X for f in probe_families(net, count=1024, seed=2)])
    scores = run_isolated(predictors["iris", "pass"], X)
    assert_matches_reference(net, X, scores, "pass")
    module = load_module(predictors["iris", "pass"])
    labels = [label for (label,) in module.predict_many(X.tolist())]
    assert labels == list(reference.predict_labels(net, X))
    assert set(labels) <= set(net.class_labels) and len(set(labels)) == 3


@pytest.mark.parametrize("activation", ["tanh", "logistic"])
def test_multi_output_networks_match_reference(activation, tmp_path):
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(800, n_features=5, noise=0.5, random_state=3)
    model = RandomNodeRegressor(n_nodes=120, activation=activation, random_state=3)
    bundle = to_bundle(model.fit(X, np.column_stack([y, X[:, 0] * y])),
                       feature_names=[f"x{i}" for i in range(5)], target_names=["y", "x0_y"])
    path = emit_file(bundle, tmp_path / "multi.py")
    probes = np.vstack([f.X for f in probe_families(bundle.network, count=512)])
    got = run_isolated(path, probes)
    assert got.shape == (len(probes), 2)
    assert_matches_reference(bundle.network, probes, got, "pass")


@pytest.mark.slow
def test_every_interpreter_on_the_machine_passes_verify(friedman_bundle, predictors):
    found = runner.find_interpreters()
    assert (sys.version_info[0], sys.version_info[1]) in found
    report = verify(friedman_bundle, predictors["friedman", "clamp"], count=512,
                    interpreters="all").as_dict()
    assert report["passed"], report["families"]
    assert report["artifact"]["engines"] == [f"python{a}.{b}" for a, b in found]
    assert report["max_rel_error"] <= 1e-10


@pytest.mark.parametrize("policy", POLICIES)
def test_verify_passes_for_each_policy(friedman_bundle, predictors, policy):
    report = verify(friedman_bundle, predictors["friedman", policy], count=1024)
    assert report.passed and report.as_dict()["artifact"]["out_of_domain"] == policy


def test_verify_catches_a_changed_weight(friedman_bundle, predictors, tmp_path):
    text = predictors["friedman", "pass"].read_text("utf-8")
    start = text.index("_HIDDEN = (\n    (\n        ") + len("_HIDDEN = (\n    (\n        ")
    weight = text[start:text.index(",", start)]
    tampered = tmp_path / "tampered.py"
    changed = repr(float(weight) * (1 + 1e-9))
    tampered.write_text(text[:start] + changed + text[start + len(weight):])
    assert not verify(friedman_bundle, tampered, count=512).passed


def test_rows_travel_exactly_both_ways(friedman_bundle, predictors):
    rng = np.random.default_rng(0)
    X = rng.standard_normal((300, 5)) * 10.0 ** rng.integers(-300, 300, size=(300, 5))
    text = runner.rows_as_csv(friedman_bundle.network.feature_names, X).decode()
    back = np.array([[float(c) for c in line.split(",")] for line in text.splitlines()[1:]])
    assert np.array_equal(back, X)
    module = load_module(predictors["friedman", "pass"])
    got = run_isolated(predictors["friedman", "pass"], X[:50])
    want = np.array([module.predict_scores(list(row)) for row in X[:50]])
    assert np.array_equal(got, want, equal_nan=True)


def test_run_reports_a_failing_predictor(friedman_bundle, predictors):
    info = {**runner.describe(predictors["friedman", "pass"]), "feature_names": ["a", "b"]}
    with pytest.raises(NodecastError, match="exit status 2: .*missing column"):
        runner.run(predictors["friedman", "pass"], np.zeros((2, 2)), info)


def test_describe_refuses_an_interpreter_that_does_not_run(predictors, tmp_path):
    with pytest.raises(NodecastError, match="not a working Python"):
        runner.describe(predictors["friedman", "pass"], interpreters=str(tmp_path / "nope"))

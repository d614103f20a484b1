"""Host builds of the generated C against the float64 reference: the precision promises of the spec,
the fixed-point estimate against the measured error, and each activation's stated error."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import reference, typical_error
from nodecast.compiler.passes.quantise import make_plan
from nodecast.compiler.verify.probes import corners, near_bounds, sobol
from tests.compiler.c_support import emit_c, need, run_c, single_node_bundle


def _probes(net, seed: int = 11, count: int = 4096) -> np.ndarray:
    """Fresh probes (not the estimate's): scrambled Sobol points, the corners, near the bounds."""
    return np.vstack([sobol(net, count, seed), corners(net, seed), near_bounds(net, seed)])


def _max_error(bundle, folder, X, policy="pass") -> np.ndarray:
    got = run_c(folder, X)
    want = reference.predict(bundle.network, X, "clamp" if policy == "clamp" else "pass")
    return np.max(np.abs(got - want), axis=0)


def test_float64_is_within_1e_10_of_the_output_range(friedman_bundle, tmp_path):
    need("gcc")
    emit_c(friedman_bundle, tmp_path, precision="float64")
    X = _probes(friedman_bundle.network)
    want = reference.predict(friedman_bundle.network, X)
    assert np.all(_max_error(friedman_bundle, tmp_path, X) <= 1e-10 * np.ptp(want, axis=0))


def test_float32_loses_under_5_percent_of_the_validation_error(friedman_bundle, tmp_path):
    # Friedman #1 (Friedman 1991) held-out rows as scikit-learn generates them, with the same noise.
    from sklearn.datasets import make_friedman1

    need("gcc")
    X_valid, y_valid = make_friedman1(1000, n_features=5, noise=1.0, random_state=99)
    net = friedman_bundle.network
    validation_rmse = np.sqrt(np.mean((reference.predict(net, X_valid)[:, 0] - y_valid) ** 2))
    emit_c(friedman_bundle, tmp_path, precision="float32")
    X = np.vstack([X_valid, _probes(net)])
    assert _max_error(friedman_bundle, tmp_path, X)[0] <= 0.05 * validation_rmse


@pytest.fixture(scope="module")
def fixed_point_models(friedman_bundle, classifier_bundle, friedman_bundle_factory):
    return {"friedman-logistic": friedman_bundle, "iris-classifier": classifier_bundle,
            "friedman-tanh": friedman_bundle_factory(n_nodes=120, rows=1200, seed=5,
                                                     activation="tanh")}


@pytest.mark.parametrize("precision", ["q15", "q31"])
@pytest.mark.parametrize("model", ["friedman-logistic", "friedman-tanh", "iris-classifier"])
@pytest.mark.slow
def test_fixed_point_estimate_is_not_below_the_measured_error(fixed_point_models, tmp_path,
                                                             precision, model):
    need("gcc")
    bundle = fixed_point_models[model]
    emit_c(bundle, tmp_path, precision=precision, out_of_domain="clamp")
    measured = _max_error(bundle, tmp_path, _probes(bundle.network), "clamp")
    estimate = np.asarray(typical_error.estimate(bundle.network, precision).per_output)
    assert np.all(measured <= estimate), (measured, estimate)
    assert np.all(measured >= estimate / 30), (measured, estimate)  # an estimate, not a wild bound
    if precision == "q15":  # the quantisation step alone (Q15: 2^-15 of each scale) shows
        assert np.all(measured > 2.0**-15 * np.max(np.abs(bundle.network.output_scale)) / 4)


IMPLS = [("float32", "rational"), ("float64", "rational"), ("float32", "table"),
         ("float64", "table")]


@pytest.mark.parametrize("activation", ["tanh", "logistic"])
@pytest.mark.parametrize("precision, impl", IMPLS)
@pytest.mark.slow
def test_libm_free_activation_is_within_its_stated_error(tmp_path, precision, impl, activation):
    need("gcc")
    from scipy.special import expit

    bundle = single_node_bundle(activation, reach=12.0)
    artifact = emit_c(bundle, tmp_path, precision=precision, activation_impl=impl)
    stated = float(_macro(artifact / "model.h", "MODEL_ACTIVATION_ERROR"))
    z = np.linspace(-12.0, 12.0, 240_001)
    if precision == "float32":
        z = z.astype(np.float32).astype(np.float64)  # the points the float32 artifact receives
    got = run_c(tmp_path, z[:, None])[:, 0]
    # references: NumPy's tanh and SciPy's logistic (expit), both double precision
    want = np.tanh(z) if activation == "tanh" else expit(z)
    measured = np.max(np.abs(got - want))
    one_rounding = 2.0**-24 if precision == "float32" else 2.0**-53  # IEEE 754 unit roundoff
    limit = stated if activation == "tanh" else stated / 2 + 2 * one_rounding
    assert measured <= limit
    assert measured >= limit / 20  # the statement is tight enough to be informative


@pytest.mark.parametrize("activation", ["tanh", "logistic"])
@pytest.mark.parametrize("precision, frac", [("q15", 10), ("q31", 12)])
def test_fixed_point_table_is_within_its_stated_error(tmp_path, precision, frac, activation):
    """Inputs on the Q grid of the input format, so only the table and the output's own rounding
    stand between the artifact and tanh (or the logistic)."""
    need("gcc")
    from scipy.special import expit

    bundle = single_node_bundle(activation, reach=8.0)
    plan = make_plan(bundle.network, precision)
    assert plan.input_frac[0] >= frac  # the grid below is exact in the input's format
    emit_c(bundle, tmp_path, precision=precision, out_of_domain="clamp")
    z = np.arange(-8 * 2**frac, 8 * 2**frac + 1) * 2.0**-frac
    got = run_c(tmp_path, z[:, None])[:, 0]
    want = np.tanh(z) if activation == "tanh" else expit(z)
    output_rounding = 0.5 * 2.0 ** -plan.result_frac[0]
    limit = (plan.table_error if activation == "tanh" else plan.table_error / 2) + output_rounding
    assert np.max(np.abs(got - want)) <= limit


def _macro(header, name: str) -> str:
    for line in header.read_text().splitlines():
        if line.startswith(f"#define {name} "):
            return line.split()[2]
    raise AssertionError(f"{name} not in {header}")


def test_single_node_bundle_is_its_activation():
    # The helper must compute g(x) exactly in the float64 reference: tanh from NumPy.
    from nodecast.compiler.reference import predict

    x = np.linspace(-8.0, 8.0, 101)[:, None]
    assert np.max(np.abs(predict(single_node_bundle("tanh").network, x)[:, 0] - np.tanh(x[:, 0]))) \
        < 1e-15

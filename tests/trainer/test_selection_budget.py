"""The precision budget: points whose estimated export error exceeds the tolerance are rejected,
and the estimate is not below what the float32 ONNX export really loses in onnxruntime."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler.errors import NodecastError
from nodecast.trainer import select, to_bundle

GRID = dict(nodes=[40, 120], neighbors=[8, 20], ridges=[0.0, 1e-6, 1e-2])


@pytest.fixture(scope="module")
def friedman():
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    return make_friedman1(n_samples=400, n_features=5, noise=0.3, random_state=11)


@pytest.fixture(scope="module")
def estimates(friedman):
    """Per-point estimates from a search whose tolerance rejects nothing."""
    X, y = friedman
    result = select(X, y, folds=3, seed=0, precision="float32", tolerance=1e9, **GRID)
    return result


def _measured_float32_error(bundle) -> float:
    # onnxruntime runs the float32 artifact; IEEE 754 float32 arithmetic is what it measures.
    import onnxruntime

    from nodecast.compiler import emit, reference
    from nodecast.compiler.domain_points import domain_probes

    (data,) = emit(bundle, "onnx", precision="float32").files.values()
    session = onnxruntime.InferenceSession(data, providers=["CPUExecutionProvider"])
    X = domain_probes(bundle.network)
    name = session.get_inputs()[0].name
    out = session.run(None, {name: X.astype(np.float32)})[0]
    return float(np.max(np.abs(out.reshape(-1) - reference.predict(bundle.network, X).reshape(-1))))


def test_every_point_has_an_estimate_and_ridge_shrinks_it(estimates):
    assert all(p.estimate is not None and p.estimate > 0 for p in estimates.points)
    by_key = {(p.nodes, p.neighbors, p.ridge): p.estimate for p in estimates.points}
    # common practice: a ridge penalty bounds the output weights, so the float32 error falls
    assert by_key[(120, 8, 1e-2)] < by_key[(120, 8, 0.0)]


def test_budget_rejects_points_and_the_choice_meets_it(friedman, estimates):
    X, y = friedman
    values = sorted(p.estimate for p in estimates.points)
    tolerance = values[len(values) // 2]
    result = select(X, y, folds=3, seed=0, precision="float32", tolerance=tolerance, **GRID)
    rejected = [p for p in result.points if not p.meets_budget]
    assert rejected and all(p.estimate > tolerance for p in rejected)
    assert result.chosen.meets_budget and result.chosen.estimate <= tolerance
    assert result.estimate.precision == "float32" and result.estimate.max_abs <= tolerance
    assert result.as_dict()["rejected_by_budget"] == len(rejected)


def test_no_point_meeting_the_tolerance_names_the_best_estimate(friedman, estimates):
    X, y = friedman
    best = min(p.estimate for p in estimates.points)
    with pytest.raises(NodecastError, match=f"best estimated export error is {best:.3g}"):
        select(X, y, folds=3, seed=0, precision="float32", tolerance=best / 10, **GRID)


def test_estimate_is_not_below_the_measured_float32_error(friedman, estimates):
    bundle = to_bundle(estimates.model)
    assert _measured_float32_error(bundle) <= estimates.estimate.max_abs


def test_estimate_covers_an_ill_conditioned_model(friedman):
    X, y = friedman  # lambda = 0 and nodes close to the rows: large, cancelling output weights
    result = select(X, y, nodes=[380], neighbors=[6], ridges=[0.0], folds=3, precision="float32")
    bundle = to_bundle(result.model)
    assert np.max(np.abs(bundle.network.output_weights)) > 1e3
    measured = _measured_float32_error(bundle)
    assert measured > 1e-4  # float32 really loses accuracy here
    assert measured <= result.estimate.max_abs


@pytest.mark.slow
def test_fixed_point_budget(friedman, estimates):
    X, y = friedman
    small = dict(nodes=[40], neighbors=[20], ridges=[1e-6, 1e-2])
    free = select(X, y, folds=3, seed=0, precision="q15", tolerance=1e9, **small)
    loose, tight = sorted(p.estimate for p in free.points)
    result = select(X, y, folds=3, seed=0, precision="q15", tolerance=(loose + tight) / 2, **small)
    assert sum(not p.meets_budget for p in result.points) == 1
    assert result.estimate.precision == "q15" and result.chosen.estimate == loose

"""Shared fixtures: small trained bundles, built once per test session."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import settings

# Property tests draw the same examples on every run (CI stays reproducible) and never fail on
# timing alone (the machine is shared); tests that need more examples say so themselves.
settings.register_profile("nodecast", derandomize=True, database=None, deadline=None)
settings.load_profile("nodecast")


def _friedman_bundle(n_nodes=200, ridge=1e-6, rows=2000, seed=0, **params):
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(rows, n_features=5, noise=1.0, random_state=seed)
    model = RandomNodeRegressor(n_nodes=n_nodes, ridge=ridge, random_state=seed, **params).fit(X, y)
    return to_bundle(model, feature_names=[f"x{i}" for i in range(5)], target_names=["y"],
                     feature_units=["1"] * 5, target_units=["1"])


@pytest.fixture(scope="session")
def friedman_bundle():
    """A default-settings regression bundle on Friedman #1 (5 features, 200 nodes)."""
    return _friedman_bundle()


@pytest.fixture(scope="session")
def ill_conditioned_bundle():
    """lambda = 0 and many nodes: large, cancelling output weights."""
    return _friedman_bundle(n_nodes=1500, ridge=0.0, rows=2000)


@pytest.fixture(scope="session")
def classifier_bundle():
    """Three string-labelled classes from scikit-learn's iris data (Fisher 1936)."""
    from sklearn.datasets import load_iris

    from nodecast.trainer import RandomNodeClassifier, to_bundle

    data = load_iris()
    labels = np.array(["setosa", "versi'color", 'virgin"ica'], dtype=object)[data.target]
    model = RandomNodeClassifier(n_nodes=60, random_state=0).fit(data.data, labels)
    return to_bundle(model, feature_names=list(data.feature_names))


@pytest.fixture(scope="session")
def friedman_bundle_factory():
    return _friedman_bundle


@pytest.fixture(scope="session")
def demo_bundle():
    """The built-in demo's model (4 inputs, 200 nodes), as committed in tests/data at 8ff5fd1."""
    from pathlib import Path

    from nodecast.compiler import load

    return load(Path(__file__).parent / "data" / "demo_fan.ncast")

"""Test error of the hidden-node generators on Friedman #1, and scikit-learn's MLPRegressor.

Data: sklearn.datasets.make_friedman1 (Friedman 1991), 10 features, 20,000 training rows with noise
1.0, 5,000 noiseless test rows. For M = 250, 500, 1000: test RMSE of data-driven nodes (default
settings, k by the default rule and s = 1), fixed interval U(-1, 1) and domain-anchored nodes,
each with the default ridge ("auto") and with the ridge that is best on the test rows among
1e-8 .. 1e1 (the generator's potential, for reference only). Baseline: MLPRegressor (logistic,
one hidden layer of 100, adam, early stopping off, max_iter 2000) with its training time. Prints
JSON; asserts nothing.
Run: python tests/benchmarks/trainer_accuracy.py
"""

from __future__ import annotations

import json
import time

import numpy as np

NODES = (250, 500, 1000)
METHODS = ("data-driven", "interval", "domain-anchored")
RIDGES = tuple(10.0 ** np.arange(-8, 2))


def _rmse(model, X, y) -> float:
    return float(np.sqrt(np.mean((model.predict(X) - y) ** 2)))


def networks(X, y, X_test, y_test) -> dict:
    from nodecast.trainer import RandomNodeRegressor

    table = {}
    for method in METHODS:
        for m in NODES:
            start = time.perf_counter()
            model = RandomNodeRegressor(n_nodes=m, method=method, n_neighbors=None,
                                        slope_scale=1.0, random_state=0).fit(X, y)
            seconds = time.perf_counter() - start
            best = min((_rmse(RandomNodeRegressor(n_nodes=m, method=method, ridge=r,
                                                  n_neighbors=None, slope_scale=1.0,
                                                  random_state=0).fit(X, y), X_test, y_test), r)
                       for r in RIDGES)
            table[f"{method} M={m}"] = {
                "test_rmse_default": _rmse(model, X_test, y_test), "ridge_chosen": model.ridge_,
                "fit_seconds": seconds, "test_rmse_best_ridge": best[0], "best_ridge": best[1]}
    return table


def mlp(X, y, X_test, y_test) -> dict:
    from sklearn.neural_network import MLPRegressor
    from sklearn.preprocessing import StandardScaler

    scaler = StandardScaler().fit(X)
    start = time.perf_counter()
    model = MLPRegressor(hidden_layer_sizes=(100,), activation="logistic", max_iter=2000,
                         random_state=0).fit(scaler.transform(X), y)
    seconds = time.perf_counter() - start
    rmse = float(np.sqrt(np.mean((model.predict(scaler.transform(X_test)) - y_test) ** 2)))
    return {"test_rmse": rmse, "fit_seconds": seconds, "iterations": int(model.n_iter_)}


def main() -> dict:
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(20_000, n_features=10, noise=1.0, random_state=0)
    X_test, y_test = make_friedman1(5_000, n_features=10, noise=0.0, random_state=1)
    result = {"networks": networks(X, y, X_test, y_test),
              "mlp_logistic_100": mlp(X, y, X_test, y_test)}
    result["data_driven_beats_interval_at_every_M"] = all(
        result["networks"][f"data-driven M={m}"]["test_rmse_default"]
        < result["networks"][f"interval M={m}"]["test_rmse_default"] for m in NODES)
    return result


if __name__ == "__main__":
    print(json.dumps(main(), indent=2))

"""Default ``train`` on wide tabular data: 312 features, 2,200 rows, 200 nodes; time and accuracy.

Data (invented, seeded; a packaging line's quality log): 200 continuous sensor columns that share
eight latent factors (correlated, as real sensor banks are), 12 one-hot columns (a product family
of 12 kinds), 100 count columns (Poisson, many ties), and a target that depends nonlinearly on
three latents, the family and two counts, plus noise. 1,800 rows train, 400 rows test.

Times :func:`nodecast.trainer.training.train` (what ``nodecast train`` runs: a validation fit on
80% of the rows, then the fit on all rows) with the default BLAS threads, and reports the test
RMSE over the test target's standard deviation ("normalised RMSE") beside scikit-learn's RidgeCV
and HistGradientBoostingRegressor on the same split. Wall and CPU time (all threads) are both
reported: on a shared machine the wall time mostly measures the other load. Prints JSON; asserts nothing.
Run: python tests/benchmarks/wide_train.py
"""

from __future__ import annotations

import json
import time

import numpy as np

ROWS, TRAIN_ROWS = 2200, 1800


def wide_data(seed: int = 0):
    rng = np.random.default_rng(seed)
    latent = rng.standard_normal((ROWS, 8))
    sensors = latent @ rng.standard_normal((8, 200)) + 0.3 * rng.standard_normal((ROWS, 200))
    family = rng.integers(12, size=ROWS)
    onehot = np.eye(12)[family]
    counts = rng.poisson(rng.uniform(0.2, 4.0, size=100), size=(ROWS, 100)).astype(float)
    y = (np.sin(latent[:, 0]) + 0.5 * latent[:, 1] * latent[:, 2] + 0.3 * (family % 3)
         + 0.2 * counts[:, 0] - 0.1 * counts[:, 1] + 0.3 * rng.standard_normal(ROWS))
    return np.column_stack([sensors, onehot, counts]), y


class _Table:
    """The two methods of :class:`nodecast.compiler.csvio.Table` that ``train`` reads."""

    def __init__(self, X, y):
        self.header = tuple(f"x{i}" for i in range(X.shape[1])) + ("y",)
        self.data, self.source = np.column_stack([X, y]), "<wide>"

    def numbers(self, names):
        return self.data[:, [self.header.index(name) for name in names]]


def normalised_rmse(predicted, y) -> float:
    return float(np.sqrt(np.mean((predicted - y) ** 2)) / np.std(y))


def main() -> None:
    from sklearn.ensemble import HistGradientBoostingRegressor
    from sklearn.linear_model import RidgeCV

    from nodecast.trainer.training import TrainingJob, train

    X, y = wide_data()
    fit, test = slice(0, TRAIN_ROWS), slice(TRAIN_ROWS, None)
    start, cpu = time.perf_counter(), time.process_time()
    bundle = train(_Table(X[fit], y[fit]), TrainingJob(targets=("y",)))
    seconds, cpu = time.perf_counter() - start, time.process_time() - cpu
    from nodecast.compiler.reference import predict

    ours = predict(bundle.network, X[test])[:, 0]
    ridge = RidgeCV(alphas=np.logspace(-3, 3, 13)).fit(X[fit], y[fit]).predict(X[test])
    trees = HistGradientBoostingRegressor(random_state=0).fit(X[fit], y[fit]).predict(X[test])
    print(json.dumps({
        "rows": TRAIN_ROWS, "features": X.shape[1], "nodes": int(bundle.network.hidden_weights.shape[0]),
        "train_seconds": round(seconds, 2), "train_cpu_seconds": round(cpu, 2),
        "diagnostics": bundle.metadata.get("diagnostics"),
        "normalised_test_rmse": {"nodecast": normalised_rmse(ours, y[test]),
                                 "RidgeCV": normalised_rmse(ridge, y[test]),
                                 "HistGradientBoosting": normalised_rmse(trees, y[test])}},
        indent=2))


if __name__ == "__main__":
    main()

"""Normalised test RMSE of the default regressor beside scikit-learn's RidgeCV and
HistGradientBoostingRegressor, on data that breaks the assumptions of smooth synthetic benchmarks.

Data sets (all offline):
* ``diabetes``: scikit-learn's diabetes data (Efron et al. 2004), 442 rows, 10 features, one of
  them a two-level column;
* ``friedman1``: Friedman #1 (Friedman 1991, sklearn.datasets.make_friedman1), 2,000 rows, noise 1;
* ``counts_one_hot``: invented workshop log, 600 rows, two count columns, a one-hot family of four
  kinds, a yes/no column, a two-level gauge, every row three times (tests/trainer/test_local_fits.py);
* ``heavy_tailed``: invented pump log, 1,500 rows, five log-normal flow readings (the middle 99% of
  a column spans about a fifth of its range) and two uniform ones, target smooth in the logs.

Each set is split 75/25 with seeds 0, 1, 2; the score is the test RMSE over the test target's
standard deviation, mean and spread over the seeds. Prints JSON; asserts nothing.
Run: python tests/benchmarks/real_data_accuracy.py
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))  # the repository, for tests.helpers
from tests.helpers import workshop_log  # noqa: E402

SEEDS = (0, 1, 2)



def heavy_tailed(rows=1500, seed=0):
    rng = np.random.default_rng(seed)
    logs = rng.normal(0.0, 1.0, size=(rows, 5))
    X = np.column_stack([np.exp(logs), rng.random((rows, 2))])
    y = np.sin(logs[:, 0]) + 0.5 * logs[:, 1] + X[:, 5] + 0.2 * rng.standard_normal(rows)
    return X, y


def data_sets():
    from sklearn.datasets import load_diabetes, make_friedman1

    return {"diabetes": load_diabetes(return_X_y=True),
            "friedman1": make_friedman1(2000, noise=1.0, random_state=0),
            "counts_one_hot": workshop_log(),
            "heavy_tailed": heavy_tailed()}


def scores(X, y, seed):
    from sklearn.ensemble import HistGradientBoostingRegressor
    from sklearn.linear_model import RidgeCV
    from sklearn.model_selection import train_test_split

    from nodecast.trainer import RandomNodeRegressor

    X_fit, X_test, y_fit, y_test = train_test_split(X, y, test_size=0.25, random_state=seed)
    models = {"nodecast": RandomNodeRegressor(random_state=seed),
              "RidgeCV": RidgeCV(alphas=np.logspace(-4, 4, 17)),
              "HistGradientBoosting": HistGradientBoostingRegressor(random_state=seed)}
    out = {}
    for name, model in models.items():
        predicted = model.fit(X_fit, y_fit).predict(X_test)
        out[name] = float(np.sqrt(np.mean((predicted - y_test) ** 2)) / np.std(y_test))
    return out


def main() -> None:
    report = {}
    for name, (X, y) in data_sets().items():
        runs = [scores(X, y, seed) for seed in SEEDS]
        report[name] = {model: {"mean": round(float(np.mean([r[model] for r in runs])), 4),
                                "sd": round(float(np.std([r[model] for r in runs], ddof=1)), 4)}
                        for model in runs[0]}
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()

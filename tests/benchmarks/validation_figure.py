"""How honest is train's validation figure? On Friedman #1 (Friedman 1991,
sklearn.datasets.make_friedman1; 5 features, noise 1.0, 3,000 rows, 150 nodes) for a few seeds:
the figure from the ridge's held-out check rows (what ``train`` reports), the figure of a second fit
on the rows not held out by row-index hash (what it reported before), and the RMSE of the final
model on 20,000 fresh rows. Prints JSON; asserts nothing.
Run: python tests/benchmarks/validation_figure.py [SEEDS]
"""

from __future__ import annotations

import json
import sys

import numpy as np


def main(seeds: int = 5) -> dict:
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor
    from nodecast.trainer.row_hash import held_out

    rows = []
    for seed in range(seeds):
        X, y = make_friedman1(3000, n_features=5, noise=1.0, random_state=seed)
        X_new, y_new = make_friedman1(20000, n_features=5, noise=1.0, random_state=100 + seed)
        model = RandomNodeRegressor(n_nodes=150, random_state=seed).fit(X, y)
        held = held_out(0, X.shape[0], 0.2, seed)
        second = RandomNodeRegressor(n_nodes=150, random_state=seed).fit(X[~held], y[~held])
        rows.append({"seed": seed, "check_rows_figure": model.heldout_figures_["rmse"][0],
                     "second_fit_figure": float(np.sqrt(np.mean((second.predict(X[held]) - y[held]) ** 2))),
                     "fresh_rows_rmse": float(np.sqrt(np.mean((model.predict(X_new) - y_new) ** 2)))})
    means = {key: float(np.mean([row[key] for row in rows]))
             for key in ("check_rows_figure", "second_fit_figure", "fresh_rows_rmse")}
    return {"runs": rows, "means": means}


if __name__ == "__main__":
    print(json.dumps(main(*map(int, sys.argv[1:])), indent=2))

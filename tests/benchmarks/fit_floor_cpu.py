"""One fit against the naive floor, in CPU seconds, measured side by side in one process: for a
shared machine, where wall times of the interleaved runs of trainer_fit.py are dominated by others.

Floor: Z = X A^T + b, the activation and H^T H over the same row blocks (trainer_fit.unavoidable).
Fit: RandomNodeRegressor with a given ridge (1e-6) and with the default ("auto"). Data: Friedman #1
(Friedman 1991, sklearn.datasets.make_friedman1), 10 features, noise 1.0. Prints JSON; asserts
nothing. Run: python tests/benchmarks/fit_floor_cpu.py [ROWS] [NODES]
"""

from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
from trainer_fit import unavoidable  # noqa: E402


def main(n_rows: int = 200_000, n_nodes: int = 500) -> dict:
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor
    from nodecast.trainer.hidden import block_rows

    X, y = make_friedman1(n_rows, n_features=10, noise=1.0, random_state=0)
    rng = np.random.default_rng(1)
    A, b = rng.standard_normal((n_nodes, 10)), rng.standard_normal(n_nodes)
    result = {"rows": n_rows, "nodes": n_nodes, "load_average": os.getloadavg()}
    start = time.process_time()
    unavoidable(X, A, b, block_rows(n_nodes))
    result["floor_cpu_seconds"] = floor = time.process_time() - start
    for ridge in (1e-6, "auto"):
        start = time.process_time()
        RandomNodeRegressor(n_nodes=n_nodes, ridge=ridge, random_state=0).fit(X, y)
        seconds = time.process_time() - start
        result[f"fit_cpu_seconds_ridge_{ridge}"] = seconds
        result[f"ratio_ridge_{ridge}"] = seconds / floor
    return result


if __name__ == "__main__":
    print(json.dumps(main(*map(int, sys.argv[1:])), indent=2))

"""One fit against the naive floor, in CPU seconds, measured side by side in one process: for a
shared machine, where wall times of the interleaved runs of trainer_fit.py are dominated by others.

Floor: Z = X A^T + b, the activation and H^T H over the same row blocks (trainer_fit.unavoidable),
on one BLAS thread like the fit's own products (a threaded floor on a busy machine counts the
threads' waiting as CPU time). Fits: RandomNodeRegressor with k and s given (one layer, one pass:
what the issue's "one fit" is), with the ridge given (1e-6) and automatic; and, unless NODES >
1000, the full default (k and s searched too: up to 7 layers). Data: Friedman #1 (Friedman 1991,
sklearn.datasets.make_friedman1), 10 features, noise 1.0. Prints JSON; asserts nothing.
Run: python tests/benchmarks/fit_floor_cpu.py [ROWS] [NODES]
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
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        start = time.process_time()
        unavoidable(X, A, b, block_rows(n_nodes))
        result["floor_cpu_seconds"] = floor = time.process_time() - start
    runs = {"one_fit_ridge_1e-6": dict(ridge=1e-6, n_neighbors=22, slope_scale=1.0),
            "one_fit_ridge_auto": dict(n_neighbors=22, slope_scale=1.0)}
    if n_nodes <= 1000:
        runs["default_k_s_search"] = {}
    for name, params in runs.items():
        start = time.process_time()
        RandomNodeRegressor(n_nodes=n_nodes, random_state=0, **params).fit(X, y)
        seconds = time.process_time() - start
        result[f"{name}_cpu_seconds"] = seconds
        result[f"{name}_ratio"] = seconds / floor
    return result


if __name__ == "__main__":
    print(json.dumps(main(*map(int, sys.argv[1:])), indent=2))

"""Cost of running a fit's BLAS products on one thread (what makes the bundle independent of the
thread count): `train` on 6,000 rows x 8 features with 800 nodes and ridge 0, with the products
pinned (as shipped) and unpinned, alternately, three times each. Prints JSON; never asserts a time.
Run: OPENBLAS_NUM_THREADS=2 python tests/benchmarks/blas_thread_pin.py
"""

from __future__ import annotations

import contextlib
import json
import tempfile
import time
import types
from pathlib import Path

import numpy as np


def main() -> None:
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer import estimators, solvers
    from nodecast.trainer.training import TrainingJob, train

    rng = np.random.default_rng(0)
    X = rng.random((6000, 8))
    y = np.sin(X @ np.arange(1.0, 9.0)) + 0.1 * rng.standard_normal(6000)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "data.csv"
        header = ",".join([f"x{i}" for i in range(8)] + ["y"])
        np.savetxt(path, np.column_stack([X, y]), delimiter=",", header=header, comments="")
        table = read_table(path)
    job = TrainingJob(targets=("y",), features=(), params=dict(n_nodes=800, ridge=0.0))
    unpinned = types.SimpleNamespace(**{k: getattr(solvers, k) for k in dir(solvers)
                                        if not k.startswith("__")})
    unpinned.single_blas_thread = contextlib.nullcontext
    modes = {"pinned": solvers, "unpinned": unpinned}
    times = {mode: [] for mode in modes}
    try:
        for _ in range(3):
            for mode, namespace in modes.items():
                estimators.solvers = namespace
                start = time.perf_counter()
                train(table, job)
                times[mode].append(round(time.perf_counter() - start, 2))
    finally:
        estimators.solvers = solvers
    median = {mode: sorted(values)[1] for mode, values in times.items()}
    print(json.dumps({**times, "median_ratio_pinned_over_unpinned":
                      round(median["pinned"] / median["unpinned"], 2)}, indent=2))


if __name__ == "__main__":
    main()

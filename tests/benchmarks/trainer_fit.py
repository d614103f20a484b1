"""Fit time and peak memory of RandomNodeRegressor against the unavoidable work, measured in one run.

Data: Friedman #1 (Friedman 1991, sklearn.datasets.make_friedman1), N = 200,000 rows, n = 10,
noise 1.0; M = 500 nodes, float64. The unavoidable work is what any fit of this model must do, in
plain NumPy: forming Z = X A^T + b, the activation, and H^T H (numpy's symmetric rank-k product),
over row blocks of the same size, with the fastest in-place activation measured below. Each timing
is the best of ``REPEATS`` runs, interleaved, so that other load on the machine hurts both alike;
once with the default BLAS threads and once with one BLAS thread (threadpoolctl). The fit is timed
with the default ridge ("auto", which adds an SVD of the factor and a few error estimates) and with
a given ridge.
Prints JSON; asserts nothing. Run: python tests/benchmarks/trainer_fit.py [N]
"""

from __future__ import annotations

import json
import sys
import time
import tracemalloc

import numpy as np

REPEATS = 3
PAUSE = 1.0  # seconds between runs: lets the BLAS threads of the previous run go to sleep


def _activation_variants():
    import scipy.special

    def exp_form(Z):  # 1/(1+exp(-z)) with the sign folded into the weights: Z holds -z
        np.exp(Z, out=Z)
        Z += 1.0
        return np.divide(1.0, Z, out=Z)

    def tanh_form(Z):  # 1/2 + tanh(z/2)/2 with the halving folded in: Z holds z/2
        np.tanh(Z, out=Z)
        Z *= 0.5
        Z += 0.5
        return Z

    def plain(Z):
        return 1.0 / (1.0 + np.exp(-Z))

    def expit(Z):
        return scipy.special.expit(Z, out=Z)

    return {"exp_inplace_sign_folded": exp_form, "tanh_inplace_halving_folded": tanh_form,
            "plain_1_over_1_plus_exp": plain, "scipy_expit_inplace": expit}


def time_activations(rows: int, nodes: int) -> dict:
    Z0 = np.random.default_rng(0).standard_normal((rows, nodes)) * 3.0
    best = {}
    for name, kernel in _activation_variants().items():
        times = []
        for _ in range(5):
            Z = Z0.copy()
            start = time.perf_counter()
            kernel(Z)
            times.append(time.perf_counter() - start)
        best[name] = min(times)
    return best


def unavoidable(X, A, b, rows):
    """Seconds of Z = X A^T + b, activation and H^T H over blocks; returns (total, parts)."""
    negA_t, negb = np.ascontiguousarray(-A.T), -b
    gram = np.zeros((A.shape[0], A.shape[0]))
    parts = {"z": 0.0, "activation": 0.0, "gram": 0.0}
    buffer = np.empty((rows, A.shape[0]))
    for start in range(0, X.shape[0], rows):
        t0 = time.perf_counter()
        Z = buffer[: min(rows, X.shape[0] - start)]
        np.matmul(X[start : start + rows], negA_t, out=Z)
        Z += negb
        t1 = time.perf_counter()
        np.exp(Z, out=Z)
        Z += 1.0
        np.divide(1.0, Z, out=Z)
        t2 = time.perf_counter()
        gram += Z.T @ Z
        parts["z"] += t1 - t0
        parts["activation"] += t2 - t1
        parts["gram"] += time.perf_counter() - t2
    return sum(parts.values()), parts


def compare(X, y, n_nodes: int, rows: int) -> dict:
    """Best-of-REPEATS wall times of the unavoidable work and of the fit, interleaved."""
    from nodecast.trainer import RandomNodeRegressor

    rng = np.random.default_rng(1)
    A, b = rng.standard_normal((n_nodes, X.shape[1])), rng.standard_normal(n_nodes)
    fit_times, fixed_times, base_times, base_parts = [], [], [], None
    for _ in range(REPEATS):
        time.sleep(PAUSE)
        total, parts = unavoidable(X, A, b, rows)
        if not base_times or total < min(base_times):
            base_parts = parts
        base_times.append(total)
        for ridge, times in (("auto", fit_times), (1e-6, fixed_times)):
            time.sleep(PAUSE)
            start = time.perf_counter()
            RandomNodeRegressor(n_nodes=n_nodes, ridge=ridge, n_neighbors=None, slope_scale=1.0,
                                random_state=0).fit(X, y)
            times.append(time.perf_counter() - start)
    return {"fit_seconds": min(fit_times), "fit_seconds_given_ridge": min(fixed_times),
            "unavoidable_seconds": min(base_times), "unavoidable_parts_seconds": base_parts,
            "ratio_fit_to_unavoidable": min(fit_times) / min(base_times),
            "ratio_given_ridge_fit_to_unavoidable": min(fixed_times) / min(base_times)}


def main(n_rows: int = 200_000, n_nodes: int = 500) -> dict:
    from sklearn.datasets import make_friedman1
    from threadpoolctl import threadpool_limits

    from nodecast.trainer import RandomNodeRegressor, solvers
    from nodecast.trainer.hidden import block_rows

    X, y = make_friedman1(n_rows, n_features=10, noise=1.0, random_state=0)
    rows = block_rows(n_nodes)
    default_threads = compare(X, y, n_nodes, rows)
    with threadpool_limits(limits=1, user_api="blas"):
        one_thread = compare(X, y, n_nodes, rows)
    peaks = {}
    for rows_used in (n_rows // 2, n_rows):
        tracemalloc.start()
        model = RandomNodeRegressor(n_nodes=n_nodes, n_neighbors=None, slope_scale=1.0,
                                    random_state=0).fit(X[:rows_used], y[:rows_used])
        peaks[rows_used] = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
    peak = peaks[n_rows]
    growth = (peaks[n_rows] - peaks[n_rows // 2]) / ((X.nbytes + y.nbytes) / 2)
    return {
        "rows": n_rows, "features": 10, "nodes": n_nodes, "block_rows": rows,
        "default_blas_threads": default_threads, "one_blas_thread": one_thread,
        "fit_peak_traced_bytes": peak, "data_bytes": X.nbytes + y.nbytes,
        "peak_over_data": peak / (X.nbytes + y.nbytes),
        "peak_growth_per_data_byte": growth,  # extra peak bytes per extra byte of data
        "update_limit": solvers.UPDATE_LIMIT,
        "activation_seconds_per_block": time_activations(rows, n_nodes),
        "training_rmse": float(np.sqrt(np.mean((model.predict(X) - y) ** 2))),
    }


if __name__ == "__main__":
    print(json.dumps(main(*map(int, sys.argv[1:])), indent=2))

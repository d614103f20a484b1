"""ONNX back-end throughput: onnxruntime (one thread) against the float64 NumPy reference.

n = 10 features, M = 500 nodes, 100,000 rows, Friedman #1 data (make_friedman1, Friedman 1991).
Prints JSON: rows per second of both, their ratio (measured in one run), and single-row latency.
Run: python tests/benchmarks/onnx_throughput.py
"""

from __future__ import annotations

import json
import time


def _best_of(repeats, function):
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    import onnxruntime as ort
    from sklearn.datasets import make_friedman1
    from threadpoolctl import threadpool_limits

    from nodecast.compiler import emit, reference
    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(20_000, n_features=10, noise=1.0, random_state=0)
    bundle = to_bundle(RandomNodeRegressor(n_nodes=500, random_state=0).fit(X, y))
    rows = make_friedman1(100_000, n_features=10, random_state=1)[0]
    options = ort.SessionOptions()
    options.intra_op_num_threads = options.inter_op_num_threads = 1
    result = {"rows": rows.shape[0], "n_features": 10, "n_nodes": 500}
    for precision in ("float32", "float64"):
        data = emit(bundle, "onnx", precision=precision).files["model.onnx"]
        session = ort.InferenceSession(data, options, providers=["CPUExecutionProvider"])
        batch = rows.astype(precision)
        seconds = _best_of(5, lambda s=session, b=batch: s.run(None, {"features": b}))
        latency = _best_of(2000, lambda s=session, b=batch[:1]: s.run(None, {"features": b}))
        result[f"onnxruntime_{precision}_rows_per_s"] = rows.shape[0] / seconds
        result[f"onnxruntime_{precision}_single_row_us"] = latency * 1e6
    with threadpool_limits(1):
        numpy_seconds = _best_of(5, lambda: reference.predict(bundle.network, rows))
    result["numpy_reference_rows_per_s_one_thread"] = rows.shape[0] / numpy_seconds
    for precision in ("float32", "float64"):
        result[f"ratio_onnxruntime_{precision}_over_numpy"] = (
            result[f"onnxruntime_{precision}_rows_per_s"] / result["numpy_reference_rows_per_s_one_thread"])
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()

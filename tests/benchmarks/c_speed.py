"""Benchmark: ns per prediction of the generated C (n = 10 inputs, M = 500 nodes, float32) against a
straightforward row-by-row loop with libm over the same weights, built with the same flags, and
against a single-row call through onnxruntime's Python API. Prints JSON; asserts nothing.

    python tests/benchmarks/c_speed.py [--rows 2000] [--repeats 200]
"""

from __future__ import annotations

import argparse
import json
import subprocess
import tempfile
import time
from pathlib import Path

import numpy as np

from nodecast.compiler import emit
from nodecast.compiler.passes.scaling import folded_input_layer, folded_output_layer
from nodecast.trainer import RandomNodeRegressor, to_bundle

FLAG_SETS = {"O2": ("-O2",), "O3_native": ("-O3", "-march=native")}
IMPLS = ("rational", "table", "libm")

PLAIN_LOOP = r"""
/* The straightforward version: one row at a time, node by node, with expf from libm. */
#include <math.h>
static const float plain_w[%(m)d][%(n)d] = { %(w)s };
static const float plain_b[%(m)d] = { %(b)s };
static const float plain_beta[%(m)d] = { %(beta)s };
int plain_predict(const float *x, float *y)
{
    float sum = %(c)s;
    int i, j;
    for (j = 0; j < %(m)d; ++j) {
        float z = plain_b[j];
        for (i = 0; i < %(n)d; ++i) {
            z += plain_w[j][i] * x[i];
        }
        sum += plain_beta[j] / (1.0f + expf(-z));
    }
    y[0] = sum;
    return 0;
}
"""

TIMER = r"""
#include <stdio.h>
#include <time.h>
int %(fn)s(const float *x, float *y);
static const float rows[%(rows)d][%(n)d] = { %(data)s };
int main(void)
{
    volatile float sink = 0.0f;
    double best = 1e30;
    int round, r, k;
    for (round = 0; round < 7; ++round) {
        struct timespec t0, t1;
        double ns;
        clock_gettime(CLOCK_MONOTONIC, &t0);
        for (k = 0; k < %(repeats)d; ++k) {
            for (r = 0; r < %(rows)d; ++r) {
                float y[1];
                %(fn)s(rows[r], y);
                sink += y[0];
            }
        }
        clock_gettime(CLOCK_MONOTONIC, &t1);
        ns = ((double)(t1.tv_sec - t0.tv_sec) * 1e9 + (double)(t1.tv_nsec - t0.tv_nsec))
             / ((double)%(repeats)d * %(rows)d);
        if (ns < best) {
            best = ns;
        }
    }
    printf("%%.3f\n", best);
    return sink == 12345.0f;
}
"""


def _floats(values) -> str:
    return ", ".join(f"{float(np.float32(v)):.9g}f" for v in np.ravel(values))


def _bundle(seed: int = 0):
    from sklearn.datasets import make_friedman1  # Friedman (1991) #1, 10 inputs (5 of them noise)

    X, y = make_friedman1(3000, n_features=10, noise=1.0, random_state=seed)
    model = RandomNodeRegressor(n_nodes=500, random_state=seed).fit(X, y)
    return to_bundle(model), X


def _time(folder: Path, sources: list[str], fn: str, flags, rows: np.ndarray,
          repeats: int) -> float:
    """Best of seven rounds of ``repeats`` passes over ``rows``, ns per call of ``fn``."""
    timer = TIMER % {"fn": fn, "rows": len(rows), "n": rows.shape[1], "repeats": repeats,
                     "data": _floats(rows)}
    (folder / "timer.c").write_text(timer)
    subprocess.run(["gcc", "-std=gnu99", *flags, *sources, "timer.c", "-o", "bench", "-lm"],
                   cwd=folder, check=True)
    return float(subprocess.run(["./bench"], cwd=folder, capture_output=True, text=True,
                                check=True).stdout)


def _plain_source(net) -> str:
    weights, biases = folded_input_layer(net)
    beta, bias = folded_output_layer(net)
    return PLAIN_LOOP % {"m": net.n_nodes, "n": net.n_features, "w": _floats(weights),
                         "b": _floats(biases), "beta": _floats(beta[:, 0]),
                         "c": _floats(bias)}


def _onnxruntime_single_row_ns(bundle, rows: np.ndarray, folder: Path) -> float:
    import onnxruntime as ort

    emit(bundle, "onnx", folder / "m.onnx", precision="float32")
    options = ort.SessionOptions()
    options.intra_op_num_threads = options.inter_op_num_threads = 1
    session = ort.InferenceSession(str(folder / "m.onnx"), options,
                                   providers=["CPUExecutionProvider"])
    singles = [row[None, :].astype(np.float32) for row in rows]
    best = float("inf")
    for _ in range(5):
        start = time.perf_counter()
        for row in singles:
            session.run(None, {"features": row})
        best = min(best, (time.perf_counter() - start) / len(singles) * 1e9)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=2000)
    parser.add_argument("--repeats", type=int, default=100)
    args = parser.parse_args()
    bundle, X = _bundle()
    rows = X[: args.rows]
    result = {"n_features": 10, "nodes": 500, "precision": "float32", "rows": len(rows)}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for impl in IMPLS:
            emit(bundle, "c", folder / impl, precision="float32", activation_impl=impl,
                 prefix=f"m_{impl}")
        (folder / "plain.c").write_text(_plain_source(bundle.network))
        for name, flags in FLAG_SETS.items():
            figures = {f"generated_{impl}_ns": _time(folder, [f"{impl}/m_{impl}.c"],
                                                     f"m_{impl}_predict", flags, rows, args.repeats)
                       for impl in IMPLS}
            figures["plain_loop_libm_ns"] = _time(folder, ["plain.c"], "plain_predict", flags,
                                                  rows, args.repeats)
            figures["speedup_fastest_vs_plain"] = figures["plain_loop_libm_ns"] / min(
                figures[f"generated_{impl}_ns"] for impl in IMPLS)
            result[name] = figures
        result["onnxruntime_single_row_ns"] = _onnxruntime_single_row_ns(bundle, rows, folder)
    for name in FLAG_SETS:
        fastest = min(result[name][f"generated_{impl}_ns"] for impl in IMPLS)
        result[name]["speedup_fastest_vs_onnxruntime_single_row"] = (
            result["onnxruntime_single_row_ns"] / fastest)
    print(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

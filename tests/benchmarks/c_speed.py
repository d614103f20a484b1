"""Benchmark: ns per prediction of the generated C (n = 10 inputs, M = 500 nodes, float32), each
activation implementation, against a straightforward row-by-row loop with libm over the same
weights built with the same flags, against the arithmetic floor of the CPU, and against a single-row
call through onnxruntime's Python API. Prints JSON; asserts nothing.

    python tests/benchmarks/c_speed.py [--rows 1000] [--repeats 40] [--passes 3] [--no-count]

It also counts the instructions one prediction executes on an emulated Cortex-M4F for each
activation implementation (nodecast.compiler.instruction_count; 32 in-domain probes), and the
cycles estimated from them.

Builds use ``-std=gnu99`` (GCC's default contraction: a * b + c may become one fused multiply-add)
and never ``-ffast-math``. Every binary runs ``--passes`` times, interleaved with the others, and
keeps its best time; times are CPU time of the thread (CLOCK_THREAD_CPUTIME_ID), so that a
loaded machine inflates them less.

The arithmetic floor is what the same arithmetic costs at the CPU's measured peak: the n M + M
multiply-adds at the throughput of a kernel of independent vector fused multiply-adds, plus M
activations at the throughput of the rational formula over an array (both at -O3 -march=native).
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

FLAG_SETS = {"O2": ("-O2",), "O3_native": ("-O3", "-march=native"),
             "O3_avx2": ("-O3", "-march=x86-64-v3")}
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
    for (round = 0; round < 5; ++round) {
        struct timespec t0, t1;
        double ns;
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &t0);
        for (k = 0; k < %(repeats)d; ++k) {
            for (r = 0; r < %(rows)d; ++r) {
                float y[1];
                %(fn)s(rows[r], y);
                sink += y[0];
            }
        }
        clock_gettime(CLOCK_THREAD_CPUTIME_ID, &t1);
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

FLOOR = r"""
/* Peak throughput of multiply-adds (128 independent accumulators) and of the rational tanh over an
   array of 512; prints ns per multiply-add and ns per activation. */
#include <stdio.h>
#include <time.h>
#define LANES 128
#define NODES 512
static double now(void)
{
    struct timespec t;
    clock_gettime(CLOCK_THREAD_CPUTIME_ID, &t);
    return (double)t.tv_sec * 1e9 + (double)t.tv_nsec;
}
static float rational(float z)
{
    const float m = z < 0.0f ? -z : z;
    const float c = m < 9.0f ? m : 9.0f;
    const float v = z < 0.0f ? -c : c;
    const float s = v * v;
    const float p = v * (%(p0)s + s * (%(p1)s + s * (%(p2)s + s * (%(p3)s + s * %(p4)s))));
    const float q = %(q0)s + s * (%(q1)s + s * (%(q2)s + s * (%(q3)s + s * %(q4)s)));
    return p / q;
}
int main(void)
{
    static float acc[LANES], z[NODES];
    volatile float x = 0.999f, y = 1e-4f;
    const float a = x, b = y;
    double best_fma = 1e30, best_act = 1e30, t0;
    int round, r, k;
    for (k = 0; k < NODES; ++k) { z[k] = (float)(k - NODES / 2) * 0.02f; }
    for (round = 0; round < 5; ++round) {
        t0 = now();
        for (r = 0; r < 20000; ++r) {
            for (k = 0; k < LANES; ++k) { acc[k] = acc[k] * a + b; }
        }
        t0 = (now() - t0) / (20000.0 * LANES);
        best_fma = t0 < best_fma ? t0 : best_fma;
        t0 = now();
        for (r = 0; r < 5000; ++r) {
            for (k = 0; k < NODES; ++k) { z[k] = rational(z[k] + b); }
        }
        t0 = (now() - t0) / (5000.0 * NODES);
        best_act = t0 < best_act ? t0 : best_act;
    }
    printf("%%.6f %%.6f\n", best_fma, best_act);
    return acc[3] == 12345.0f && z[7] == 12345.0f;
}
"""


def _floats(values) -> str:
    return ", ".join(f"{float(np.float32(v)):.9g}f" for v in np.ravel(values))


def _bundle(seed: int = 0):
    from sklearn.datasets import make_friedman1  # Friedman (1991) #1, 10 inputs (5 of them noise)

    X, y = make_friedman1(3000, n_features=10, noise=1.0, random_state=seed)
    model = RandomNodeRegressor(n_nodes=500, random_state=seed).fit(X, y)
    return to_bundle(model), X


def _build(folder: Path, name: str, sources: list[str], fn: str, flags, rows: np.ndarray,
           repeats: int) -> Path:
    timer = TIMER % {"fn": fn, "rows": len(rows), "n": rows.shape[1], "repeats": repeats,
                     "data": _floats(rows)}
    (folder / f"timer_{name}.c").write_text(timer)
    subprocess.run(["gcc", "-std=gnu99", *flags, *sources, f"timer_{name}.c", "-o", name, "-lm"],
                   cwd=folder, check=True)
    return folder / name


def _run(binary: Path) -> str:
    return subprocess.run([str(binary)], capture_output=True, text=True, check=True).stdout


def _plain_source(net) -> str:
    weights, biases = folded_input_layer(net)
    beta, bias = folded_output_layer(net)
    return PLAIN_LOOP % {"m": net.n_nodes, "n": net.n_features, "w": _floats(weights),
                         "b": _floats(biases), "beta": _floats(beta[:, 0]),
                         "c": _floats(bias)}


def _floor_binary(folder: Path) -> Path:
    from nodecast.compiler.backends.c_float import RATIONAL_DENOMINATOR, RATIONAL_NUMERATOR
    from nodecast.compiler.backends.c_format import float_literal

    terms = {f"p{i}": float_literal(v) for i, v in enumerate(RATIONAL_NUMERATOR)}
    terms.update({f"q{i}": float_literal(v) for i, v in enumerate(RATIONAL_DENOMINATOR)})
    (folder / "floor.c").write_text(FLOOR % terms)
    subprocess.run(["gcc", "-std=gnu99", "-O3", "-march=native", "floor.c", "-o", "floor"],
                   cwd=folder, check=True)
    return folder / "floor"


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


def _binaries(bundle, rows, folder: Path, repeats: int) -> dict[str, Path]:
    for impl in IMPLS:
        emit(bundle, "c", folder / impl, precision="float32", activation_impl=impl,
             prefix=f"m_{impl}")
    (folder / "plain.c").write_text(_plain_source(bundle.network))
    binaries = {"floor": _floor_binary(folder)}
    for flag_name, flags in FLAG_SETS.items():
        for impl in IMPLS:
            binaries[f"{flag_name}/generated_{impl}_ns"] = _build(
                folder, f"{flag_name}_{impl}", [f"{impl}/m_{impl}.c"], f"m_{impl}_predict", flags,
                rows, repeats)
        binaries[f"{flag_name}/plain_loop_libm_ns"] = _build(
            folder, f"{flag_name}_plain", ["plain.c"], "plain_predict", flags, rows, repeats)
    return binaries


def _cortex_m4f(bundle) -> dict:
    from nodecast.compiler.backends import render
    from nodecast.compiler.instruction_count import count_instructions, counting_rows, summarise

    rows = counting_rows(bundle.network)[:32]
    info = {"prefix": "model", "precision": "float32", "n_inputs": bundle.network.n_features}
    figures = {}
    for impl in IMPLS:
        artifact = render(bundle, "c", precision="float32", activation_impl=impl)
        counts = count_instructions(artifact.files, info, rows, "cortex-m4f")
        summary = summarise(counts, "cortex-m4f")
        figures[impl] = {k: summary[k] for k in ("min", "median", "max", "cycles_estimate")}
    return figures


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1000)
    parser.add_argument("--repeats", type=int, default=40)
    parser.add_argument("--passes", type=int, default=3)
    parser.add_argument("--no-count", action="store_true", help="Skip the Cortex-M4F counts.")
    args = parser.parse_args()
    bundle, X = _bundle()
    rows, net = X[: args.rows], bundle.network
    result = {"n_features": net.n_features, "nodes": net.n_nodes, "precision": "float32",
              "rows": len(rows), "flags": {k: " ".join(("-std=gnu99",) + v)
                                           for k, v in FLAG_SETS.items()}}
    best: dict[str, float] = {}
    with tempfile.TemporaryDirectory() as tmp:
        binaries = _binaries(bundle, rows, Path(tmp), args.repeats)
        for _ in range(args.passes):
            for name, binary in binaries.items():
                if name == "floor":
                    fma_ns, act_ns = map(float, _run(binary).split())
                    best["fma"] = min(best.get("fma", np.inf), fma_ns)
                    best["act"] = min(best.get("act", np.inf), act_ns)
                else:
                    best[name] = min(best.get(name, np.inf), float(_run(binary)))
        result["onnxruntime_single_row_ns"] = _onnxruntime_single_row_ns(bundle, rows, Path(tmp))
    multiply_adds = net.n_nodes * (net.n_features + net.n_outputs)
    floor = multiply_adds * best["fma"] + net.n_nodes * best["act"]
    result["floor"] = {"ns": floor, "multiply_adds": multiply_adds, "ns_per_multiply_add":
                       best["fma"], "ns_per_activation": best["act"]}
    for flag_name in FLAG_SETS:
        figures = {key.split("/")[1]: value for key, value in best.items()
                   if key.startswith(flag_name + "/")}
        fastest = min(figures[f"generated_{impl}_ns"] for impl in IMPLS)
        figures["default_rational_over_floor"] = figures["generated_rational_ns"] / floor
        figures["plain_over_default_rational"] = (figures["plain_loop_libm_ns"]
                                                  / figures["generated_rational_ns"])
        figures["plain_over_table"] = figures["plain_loop_libm_ns"] / figures["generated_table_ns"]
        figures["onnxruntime_single_row_over_fastest"] = (result["onnxruntime_single_row_ns"]
                                                          / fastest)
        result[flag_name] = figures
    if not args.no_count:
        result["cortex_m4f_instructions"] = _cortex_m4f(bundle)
    print(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

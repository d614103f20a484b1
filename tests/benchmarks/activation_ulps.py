"""Exhaustive float32 error of the activations an artifact relies on, over every float32 argument in
[-LIMIT, LIMIT]: onnxruntime's Tanh and Sigmoid, the host C library's tanhf, and our own rational
tanh evaluated in float32 as the generated C does. Prints JSON (max absolute error, max error in
units in the last place of the exact result). The certified bound states an assumption for the
runtime activations (compiler/bounds/activations.py); this script is how it was checked.

    python tests/benchmarks/activation_ulps.py [--quick]
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

LIMIT = 20.0
CHUNK = 1 << 24


def float32_range(limit: float, quick: bool):
    """Chunks of every non-negative float32 up to ``limit`` (every 4096th with --quick)."""
    top = int(np.float32(limit).view(np.uint32))
    stride = 4096 if quick else 1
    for start in range(0, top + 1, CHUNK * stride):
        bits = np.arange(start, min(start + CHUNK * stride, top + 1), stride, dtype=np.uint32)
        yield bits.view(np.float32)


def ulps(got: np.ndarray, exact: np.ndarray) -> np.ndarray:
    spacing = np.spacing(np.abs(exact).astype(np.float32)).astype(np.float64)
    return np.abs(got.astype(np.float64) - exact) / spacing


def measure(function, exact_function, quick: bool) -> dict:
    worst_abs, worst_ulp = 0.0, 0.0
    for z in float32_range(LIMIT, quick):
        for signed in (z, -z):
            got = function(signed)
            exact = exact_function(signed.astype(np.float64))
            worst_abs = max(worst_abs, float(np.max(np.abs(got.astype(np.float64) - exact))))
            worst_ulp = max(worst_ulp, float(np.max(ulps(got, exact))))
    return {"max_abs_error": worst_abs, "max_ulp": worst_ulp}


def onnx_op(op: str):
    import onnxruntime as ort
    from onnx import TensorProto, helper

    graph = helper.make_graph([helper.make_node(op, ["x"], ["y"])], "g",
                              [helper.make_tensor_value_info("x", TensorProto.FLOAT, [None])],
                              [helper.make_tensor_value_info("y", TensorProto.FLOAT, [None])])
    model = helper.make_model(graph, opset_imports=[helper.make_opsetid("", 18)], ir_version=8)
    options = ort.SessionOptions()
    options.intra_op_num_threads = 1
    session = ort.InferenceSession(model.SerializeToString(), options,
                                   providers=["CPUExecutionProvider"])
    return lambda z: session.run(None, {"x": z})[0]


def host_tanhf(quick: bool) -> dict:
    source = r"""
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <stdint.h>
int main(int argc, char **argv) {
    uint32_t top, bits, stride = (uint32_t)(argc > 1 ? 4096 : 1);
    float limit = 20.0f, x, y;
    double worst_abs = 0.0, worst_ulp = 0.0, e, exact;
    memcpy(&top, &limit, 4);
    for (bits = 0; bits <= top; bits += stride) {
        memcpy(&x, &bits, 4);
        y = tanhf(x);
        exact = tanh((double)x);
        e = fabs((double)y - exact);
        if (e > worst_abs) worst_abs = e;
        {
            float r = (float)fabs(exact);
            float next = nextafterf(r, 2.0f);
            double ulp = (double)next - (double)r;
            if (e / ulp > worst_ulp) worst_ulp = e / ulp;
        }
    }
    printf("%.17g %.17g\n", worst_abs, worst_ulp);
    return 0;
}
"""
    with tempfile.TemporaryDirectory() as folder:
        c, exe = Path(folder) / "t.c", Path(folder) / "t"
        c.write_text(source)
        subprocess.run(["gcc", "-O2", "-std=c99", str(c), "-o", str(exe), "-lm"], check=True)
        out = subprocess.run([str(exe)] + (["q"] if quick else []), check=True,
                             capture_output=True, text=True).stdout.split()
    return {"max_abs_error": float(out[0]), "max_ulp": float(out[1])}


def main() -> None:
    quick = "--quick" in sys.argv
    from nodecast.compiler.bounds.activations import rational_float32

    started = time.process_time()
    result = {
        "arguments": "every float32 in [-20, 20]" + (" (every 4096th)" if quick else ""),
        "onnxruntime_tanh": measure(onnx_op("Tanh"), np.tanh, quick),
        "onnxruntime_sigmoid": measure(onnx_op("Sigmoid"), lambda z: 0.5 + 0.5 * np.tanh(0.5 * z),
                                       quick),
        "host_tanhf": host_tanhf(quick),
        "rational_float32": measure(rational_float32, np.tanh, quick),
    }
    import onnxruntime

    result["onnxruntime_version"] = onnxruntime.__version__
    result["cpu_seconds"] = time.process_time() - started
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()

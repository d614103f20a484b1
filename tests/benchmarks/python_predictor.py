"""Benchmark: the generated Python predictor against the standard-library formulations of the same
forward pass, on every Python 3.8+ interpreter of the machine (run isolated, ``-I -S``).

Model: n = 10 features (Friedman #1 with 5 noise features, ``sklearn.datasets.make_friedman1``,
Friedman 1991), M = 500 nodes, default training settings. Each formulation evaluates the same
prepared constants (halved logistic weights with the bias as a last column, as the generator emits
them), so only the dot products differ: explicit loops, ``sum(map(operator.mul, ...))`` per node,
the nested ``map(sum, map(map, repeat(mul), ...))`` (the generated code's fallback),
``math.fsum`` (exactly rounded sums), and ``math.sumprod`` (Python 3.12+, extended precision).

Prints JSON: per interpreter, each formulation's microseconds per row, rows per second and max error
relative to the output range against the float64 NumPy reference; the generated ``predict``'s
figures and its ratio to the fastest formulation; and the command line's end-to-end rows per second
on 10,000 CSV rows. Times are CPU times (``time.process_time``, the fastest of interleaved rounds),
so other work on the machine disturbs them little. No assertions: timings depend on the machine.

    python tests/benchmarks/python_predictor.py [--rounds 25] [--rows 100]
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

CHILD = r'''
import importlib.util, json, math, sys, time
from itertools import repeat
from operator import add, mul, sub, truediv

setup = json.load(open(sys.argv[1]))
spec = importlib.util.spec_from_file_location("predictor", setup["predictor"])
predictor = importlib.util.module_from_spec(spec)
spec.loader.exec_module(predictor)
HIDDEN, BETA = predictor._HIDDEN, predictor._OUTPUT_WEIGHTS[0]
COLUMNS = tuple(zip(*HIDDEN))
OFFSET, SCALE = predictor._INPUT_OFFSET, predictor._INPUT_SCALE
BIAS, Y_OFF = predictor._OUTPUT_BIAS[0], predictor._OUTPUT_OFFSET[0]
Y_SCALE = predictor._OUTPUT_SCALE[0]
tanh, fsum = math.tanh, math.fsum

def normalised(x):
    u = list(map(truediv, map(sub, x, OFFSET), SCALE))
    u.append(1.0)
    return u

def explicit_loops(x):
    u, v = normalised(x), BIAS
    for row, beta in zip(HIDDEN, BETA):
        z = 0.0
        for a, ui in zip(row, u):
            z += a * ui
        v += beta * tanh(z)
    return Y_OFF + Y_SCALE * v

def sum_map(x):
    u = normalised(x)
    t = [tanh(sum(map(mul, row, u))) for row in HIDDEN]
    return Y_OFF + Y_SCALE * (sum(map(mul, BETA, t)) + BIAS)

def sum_map_nested(x):
    u = normalised(x)
    t = list(map(tanh, map(sum, map(map, repeat(mul), HIDDEN, repeat(u)))))
    return Y_OFF + Y_SCALE * (sum(map(mul, BETA, t)) + BIAS)

def by_columns(x):
    z = [0.0] * len(HIDDEN)
    for column, ui in zip(COLUMNS, normalised(x)):
        z = list(map(add, z, map(mul, column, repeat(ui))))
    return Y_OFF + Y_SCALE * (sum(map(mul, BETA, map(tanh, z))) + BIAS)

def fsum_map(x):
    u = normalised(x)
    t = list(map(tanh, map(fsum, map(map, repeat(mul), HIDDEN, repeat(u)))))
    return Y_OFF + Y_SCALE * (fsum(map(mul, BETA, t)) + BIAS)

candidates = [explicit_loops, sum_map, sum_map_nested, by_columns, fsum_map]
if hasattr(math, "sumprod"):
    sumprod = math.sumprod

    def sumprod_map(x):
        u = normalised(x)
        t = list(map(tanh, map(sumprod, HIDDEN, repeat(u))))
        return Y_OFF + Y_SCALE * (sumprod(BETA, t) + BIAS)

    candidates.append(sumprod_map)

def generated_predict(x):
    return predictor.predict(x)[0]

candidates.append(generated_predict)
rows, probes = setup["rows"], setup["probes"]
best = {f.__name__: float("inf") for f in candidates}
for _ in range(setup["rounds"]):
    for f in candidates:  # interleaved, so a burst of load hits every formulation alike
        start = time.process_time()  # CPU time: robust to other processes sharing the cores
        for x in rows:
            f(x)
        best[f.__name__] = min(best[f.__name__], (time.process_time() - start) / len(rows))
outputs = {f.__name__: [f(x) for x in probes] for f in candidates}
print(json.dumps({"version": "%d.%d" % sys.version_info[:2], "seconds_per_row": best,
                  "outputs": outputs}))
'''


def build_model(n_features=10, n_nodes=500, seed=0):
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(3000, n_features=n_features, noise=1.0, random_state=seed)
    model = RandomNodeRegressor(n_nodes=n_nodes, random_state=seed).fit(X, y)
    return to_bundle(model, feature_names=[f"x{i}" for i in range(n_features)], target_names=["y"])


def formulation_figures(executable, setup_path, reference, output_range) -> dict:
    done = subprocess.run([executable, "-I", "-S", "-c", CHILD, str(setup_path)],
                          capture_output=True, text=True, check=True)
    result = json.loads(done.stdout)
    figures = {}
    for name, seconds in result["seconds_per_row"].items():
        error = np.max(np.abs(np.asarray(result["outputs"][name]) - reference)) / output_range
        figures[name] = {"us_per_row": round(seconds * 1e6, 2),
                         "rows_per_second": round(1 / seconds),
                         "max_error_over_range": float(error)}
    return figures


def command_line_rates(executable, predictor, csv_path, rows) -> dict:
    """Rows per second of ``python3 -I -S predictor.py rows.csv``, startup and CSV included, by
    the child's CPU time (robust to load) and by the wall clock."""
    before, start = resource.getrusage(resource.RUSAGE_CHILDREN), time.perf_counter()
    subprocess.run([executable, "-I", "-S", str(predictor), str(csv_path)], check=True,
                   stdout=subprocess.DEVNULL)
    wall, after = time.perf_counter() - start, resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
    return {"rows": rows, "rows_per_cpu_second": round(rows / cpu),
            "rows_per_wall_second": round(rows / wall)}


def main(argv=None) -> None:
    from nodecast.compiler import emit, reference
    from nodecast.compiler.domain_points import domain_probes
    from nodecast.compiler.verify.runners.python import find_interpreters, rows_as_csv

    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=25)
    parser.add_argument("--rows", type=int, default=100)
    options = parser.parse_args(argv)
    net = (bundle := build_model()).network
    folder = Path(tempfile.mkdtemp(prefix="nodecast-pybench-"))
    predictor = folder / "predictor.py"
    emit(bundle, "python", predictor)
    probes = domain_probes(net, count=512, seed=5)
    reference_outputs = reference.predict(net, probes)[:, 0]
    output_range = float(np.ptp(reference_outputs))
    timing_rows = domain_probes(net, count=options.rows, seed=9)[: options.rows]
    setup = folder / "setup.json"
    setup.write_text(json.dumps({"predictor": str(predictor), "rounds": options.rounds,
                                 "rows": timing_rows.tolist(), "probes": probes.tolist()}))
    cli_rows = domain_probes(net, count=10_000, seed=11)[:10_000]
    csv_path = folder / "rows.csv"
    csv_path.write_bytes(rows_as_csv(net.feature_names, cli_rows))
    report = {"model": {"features": net.n_features, "nodes": net.n_nodes, "outputs": 1},
              "timing_rows": options.rows, "rounds": options.rounds, "interpreters": {}}
    for (major, minor), executable in find_interpreters().items():
        figures = formulation_figures(executable, setup, reference_outputs, output_range)
        generated = figures.pop("generated_predict")
        fastest = min(figures, key=lambda name: figures[name]["us_per_row"])
        ratio = generated["us_per_row"] / figures[fastest]["us_per_row"]
        report["interpreters"][f"{major}.{minor}"] = {
            "formulations": figures, "fastest": fastest, "generated_predict": generated,
            "generated_over_fastest": round(ratio, 3),
            "command_line": command_line_rates(executable, predictor, csv_path, len(cli_rows))}
    json.dump(report, sys.stdout, indent=2)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()

"""`nodecast select` streamed, in memory and on a LocalCluster, side by side. Prints JSON; asserts
nothing.

Data: an invented sensor log, ROWS rows x 10 features (uniform), target sin(3 x0) + x1 x2 + 0.1 x3
plus noise 0.05, written as Parquet (row groups of 50,000 rows). The search: FOLDS folds, nodes
NODES / 2 and NODES, two data-driven layers (the default k and k = 22), ridges 1e-6 and 1e-3,
then the final fit of the chosen point (default validation fraction). Measured in one
run, each mode in a subprocess (the cluster's start-up excluded): wall and CPU seconds (the
cluster's: the client's only, its workers' CPU is not counted), peak resident memory, and for the
cluster the largest relative difference of its output weights and CV figures to streaming.

Run: python tests/benchmarks/select_scale.py [ROWS] [NODES] [FOLDS] [WORKERS]
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FEATURES = 10
GROUP = 50_000


def write_data(path: Path, rows: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    writer = None
    for start in range(0, rows, GROUP):
        rng = np.random.default_rng(start)
        X = rng.uniform(size=(min(GROUP, rows - start), FEATURES))
        columns = {f"x{i}": X[:, i] for i in range(FEATURES)}
        columns["y"] = (np.sin(3 * X[:, 0]) + X[:, 1] * X[:, 2] + 0.1 * X[:, 3]
                        + rng.normal(0, 0.05, X.shape[0]))
        table = pa.table(columns)
        writer = writer or pq.ParquetWriter(path, table.schema)
        writer.write_table(table, row_group_size=GROUP)
    writer.close()


RUN = """
import json, resource, sys, time
import numpy as np
path, nodes, folds, mode, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4], sys.argv[5]
from nodecast.trainer.grid import make_grid
from nodecast.trainer.method_grid import layer_grid
from nodecast.trainer.selection import SearchSettings
from nodecast.trainer.training import TrainingJob
job = TrainingJob(targets=("y",), seed=0)
grid = make_grid([nodes // 2, nodes], [1e-6, 1e-3], layer_grid(["data-driven"], {"n_neighbors": [None, 22]}))
settings = SearchSettings(folds=folds, seed=0, n_jobs=1)
if mode.startswith("cluster"):
    from nodecast.trainer import distributed
    context = distributed.connect("local:" + mode.partition(":")[2])
    context.__enter__()
    distributed.connect = lambda address: __import__("contextlib").nullcontext()
start, cpu = time.perf_counter(), time.process_time()
if mode == "stream":
    from nodecast.trainer.selection_stream import select_streaming
    from nodecast.trainer.sources import ParquetSource
    result, bundle = select_streaming(ParquetSource(path, 50_000), job, grid, settings)
elif mode == "memory":
    import pyarrow.csv  # noqa: F401 (the table read whole, as a small CSV would be)
    import pyarrow.parquet as pq
    from nodecast.compiler.csvio import Table
    from nodecast.trainer.selection_run import run_selection
    frame = pq.read_table(path).to_pandas()
    class Whole(Table):  # the parsed numbers, without a CSV text round trip
        def numbers(self, names):
            return frame[list(names)].to_numpy(dtype=np.float64)
    table = Whole(tuple(frame.columns), [()] * len(frame), path, (), 1)
    result, bundle = run_selection(table, job, grid, settings)
else:
    from nodecast.trainer.selection_cluster import select_on_cluster
    result, bundle = select_on_cluster(path, job, grid, settings, "local")
wall, cpu = time.perf_counter() - start, time.process_time() - cpu
np.save(out, bundle.network.output_weights)
print(json.dumps({"wall_seconds": wall, "cpu_seconds": cpu,
                  "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "chosen": result.chosen.describe(),
                  "fold_rmse": [list(p.fold_rmse) for p in result.points]}))
"""


def run(path, nodes, folds, mode, folder) -> dict:
    out = str(Path(folder) / f"{mode.replace(':', '_')}.npy")
    text = subprocess.run([sys.executable, "-c", RUN, str(path), str(nodes), str(folds), mode, out],
                          check=True, capture_output=True, text=True).stdout
    report = json.loads(text.strip().splitlines()[-1])
    report["weights"] = np.load(out)
    return report


def main(rows: int, nodes: int, folds: int, workers: int) -> dict:
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "log.parquet"
        write_data(path, rows)
        load = os.getloadavg()[0]
        results = {mode: run(path, nodes, folds, mode, folder)
                   for mode in ("stream", "memory", f"cluster:{workers}")}
    stream, cluster = results["stream"], results[f"cluster:{workers}"]
    weights = stream.pop("weights")
    cluster_weights = cluster.pop("weights")
    results["memory"].pop("weights")
    a, b = np.array(stream["fold_rmse"]), np.array(cluster["fold_rmse"])
    return {"rows": rows, "nodes": nodes, "folds": folds, "workers": workers,
            "load_average_before": load, "load_average_after": os.getloadavg()[0],
            **{mode: {k: v for k, v in r.items() if k != "fold_rmse"} for mode, r in results.items()},
            "cluster_vs_stream": {
                "output_weights_relative": float(np.max(np.abs(weights - cluster_weights))
                                                 / np.max(np.abs(weights))),
                "cv_rmse_relative": float(np.max(np.abs(a - b) / a))}}


if __name__ == "__main__":
    args = [int(v) for v in sys.argv[1:]] + [100_000, 100, 5, 2][len(sys.argv) - 1:]
    start = time.perf_counter()
    report = main(*args[:4])
    report["benchmark_seconds"] = time.perf_counter() - start
    print(json.dumps(report, indent=2))

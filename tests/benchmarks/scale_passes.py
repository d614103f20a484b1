"""Streaming and cluster training side by side, with the per-partition costs that a plan for larger
runs is built from. Prints JSON; asserts nothing.

Data: an invented sensor log, ROWS rows x 10 features (uniform), target sin(3 x0) + x1 x2 + 0.1 x3,
written as Parquet (row groups of PARTITION rows). Measured in one run:

* ``streaming``: one fit (all rows; k, s and ridge given, so one layer and no check rows) by the
  streamed passes in a subprocess: wall and CPU
  seconds, peak resident memory, rows per second per core;
* ``in_memory``: the estimator's fit on the same rows in memory and its training figures
  (subprocess), same measurements;
* ``cluster``: the same fit on a LocalCluster of WORKERS single-threaded workers reading the file
  (cluster start-up excluded), and the largest relative output-weight difference to streaming;
* ``per_partition``: CPU seconds of each pass's partition task on one partition, and of one TSQR
  combine of two factors, measured in this process; with them ``plan_seconds(rows, workers)``.

Run: python tests/benchmarks/scale_passes.py [ROWS] [NODES] [WORKERS] [PARTITION]
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

FEATURES = 10


def write_data(path: Path, rows: int, partition: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    writer = None
    for start in range(0, rows, partition):
        rng = np.random.default_rng(start)
        X = rng.uniform(size=(min(partition, rows - start), FEATURES))
        columns = {f"x{i}": X[:, i] for i in range(FEATURES)}
        columns["y"] = np.sin(3 * X[:, 0]) + X[:, 1] * X[:, 2] + 0.1 * X[:, 3]
        table = pa.table(columns)
        writer = writer or pq.ParquetWriter(path, table.schema)
        writer.write_table(table, row_group_size=partition)
    writer.close()


RUN = """
import json, resource, sys, time
import numpy as np
path, nodes, mode = sys.argv[1], int(sys.argv[2]), sys.argv[3]
from nodecast.trainer.training import TrainingJob
job = TrainingJob(targets=("y",), params={"n_nodes": nodes, "ridge": 1e-6, "n_neighbors": 22,
                  "slope_scale": 1.0}, validation_fraction=0.0)
start, cpu = time.perf_counter(), time.process_time()
if mode == "stream":
    from nodecast.trainer.sources import ParquetSource
    from nodecast.trainer.streaming import train_streaming
    bundle = train_streaming(ParquetSource(path, 50_000), job)
else:
    import pyarrow.parquet as pq
    from nodecast.trainer import RandomNodeRegressor
    table = pq.read_table(path).to_pandas()
    X, y = table.drop(columns="y").to_numpy(), table["y"].to_numpy()
    del table
    model = RandomNodeRegressor(n_nodes=nodes, ridge=1e-6, n_neighbors=22, slope_scale=1.0,
                                random_state=0, check_fraction=0.0).fit(X, y)
    from nodecast.trainer.training import _metrics
    _metrics(model, X, y[:, None], "regression")  # the training figures streaming computes too
    class B: pass
    bundle = B(); bundle.network = B(); bundle.network.output_weights = model.coef_
wall, cpu = time.perf_counter() - start, time.process_time() - cpu
np.save(sys.argv[4], bundle.network.output_weights)
print(json.dumps({"wall_seconds": wall, "cpu_seconds": cpu,
                  "peak_rss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def run_subprocess(path, nodes, mode, out) -> dict:
    done = subprocess.run([sys.executable, "-c", RUN, str(path), str(nodes), mode, str(out)],
                          capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def cluster_fit(path, nodes, workers) -> tuple[dict, np.ndarray]:
    from nodecast.trainer.cluster_training import ClusterTraining
    from nodecast.trainer.distributed import connect
    from nodecast.trainer.frames import file_partitions
    from nodecast.trainer.training import TrainingJob

    job = TrainingJob(targets=("y",), params={"n_nodes": nodes, "ridge": 1e-6, "n_neighbors": 22,
                      "slope_scale": 1.0}, validation_fraction=0.0)
    with connect(f"local:{workers}") as client:
        client.run(lambda: __import__("nodecast.trainer.partition_passes"))  # warm the imports
        before = client.run(time.process_time)
        start = time.perf_counter()
        header, rows = file_partitions(path, job)
        bundle = ClusterTraining(header, rows, job).run()
        wall = time.perf_counter() - start
        after = client.run(time.process_time)
    cpu = sum(after[w] - before[w] for w in after)
    return ({"wall_seconds": wall, "workers": workers, "worker_cpu_seconds": cpu,
             "partitions": len(rows.parts)}, bundle.network.output_weights)


def per_partition(rows: int, nodes: int) -> dict:
    """Seconds of each partition task on one partition of ``rows`` rows (this process), for a fit
    with k and s given (one layer: one factor pass) and the default ridge's check set."""
    from nodecast.trainer import partition_passes as passes
    from nodecast.trainer.estimators import RandomNodeRegressor
    from nodecast.trainer.streamed_fit import StreamedFit

    rng = np.random.default_rng(0)
    X = rng.uniform(size=(rows, FEATURES))
    Y = (np.sin(3 * X[:, 0]) + X[:, 1] * X[:, 2])[:, None]
    fit = StreamedFit(RandomNodeRegressor(n_nodes=nodes, ridge=1e-6, n_neighbors=22, slope_scale=1.0,
                                          random_state=0,
                                          domain=(np.zeros(FEATURES), np.ones(FEATURES))),
                      "regression", FEATURES)
    fit.start(100 * rows, Y.min(axis=0), Y.max(axis=0))
    which, times = ("all", 0, 0.0, 0), {}
    start = time.process_time()
    part = passes.anchors((X, Y), 0, fit, which)
    times["anchors"] = time.process_time() - start
    fit.u_low, fit.u_high = np.zeros(FEATURES), np.ones(FEATURES)
    fit.anchor_rows = rng.uniform(size=fit.anchor_rows.shape)
    fit.strided_u, fit.strided_t = part.strided_u, part.strided_t
    fit.finish_anchors()
    start = time.process_time()
    passes.neighbours((X, Y), 0, fit, which)
    times["neighbours"] = time.process_time() - start
    fit.nearest.update(np.ascontiguousarray(X), Y, 0)
    layer = fit.layer_for(22, 1.0)
    start = time.process_time()
    left = passes.factor((X, Y), fit, layer, which)
    times["factor"] = time.process_time() - start
    right = passes.factor((X[::-1].copy(), Y[::-1].copy()), fit, layer, which)
    start = time.process_time()
    passes.combine(left, right)
    times["tsqr_combine"] = time.process_time() - start
    est = fit.estimator
    est._solve_output(est._layer_fit(layer, left[0], left[3], None))
    start = time.process_time()
    passes.figures((X, Y), est, "regression", which)
    times["figures"] = time.process_time() - start
    return times


def plan_seconds(costs: dict, partition: int, rows: float, workers: int) -> dict:
    """Wall seconds projected from per-partition costs: the partition passes shared by the workers,
    the TSQR tree (log2 of the partitions deep, one combine per level on the critical path)."""
    parts = rows / partition
    waves = np.ceil(parts / workers)
    passes = costs["anchors"] + costs["neighbours"] + costs["factor"] + costs["figures"]
    levels = int(np.ceil(np.log2(max(parts, 2))))
    return {"partitions": parts, "waves": waves, "partition_passes_seconds": waves * passes,
            "tsqr_levels": levels, "tsqr_seconds": levels * costs["tsqr_combine"],
            "total_seconds": waves * passes + levels * costs["tsqr_combine"]}


def main(rows=200_000, nodes=200, workers=2, partition=50_000) -> dict:
    import os

    result = {"rows": rows, "features": FEATURES, "nodes": nodes, "partition_rows": partition,
              "load_average_at_start": os.getloadavg()}
    with tempfile.TemporaryDirectory() as folder:
        path = Path(folder) / "log.parquet"
        write_data(path, rows, partition)
        result["streaming"] = run_subprocess(path, nodes, "stream", Path(folder) / "s.npy")
        result["in_memory"] = run_subprocess(path, nodes, "memory", Path(folder) / "m.npy")
        result["cluster"], weights = cluster_fit(path, nodes, workers)
        streamed = np.load(Path(folder) / "s.npy")
        result["cluster"]["max_relative_weight_difference"] = float(
            np.max(np.abs(weights - streamed)) / np.max(np.abs(streamed)))
    for name in ("streaming", "in_memory"):
        entry = result[name]
        entry["rows_per_cpu_second"] = rows / entry["cpu_seconds"]
    result["cluster"]["rows_per_worker_second"] = rows / result["cluster"]["wall_seconds"] / workers
    result["cluster"]["rows_per_cpu_second"] = rows / result["cluster"]["worker_cpu_seconds"]
    costs = per_partition(partition, nodes)
    result["per_partition_seconds"] = costs
    result["plan_1e9_rows_100_workers"] = plan_seconds(costs, partition, 1e9, 100)
    result["load_average_at_end"] = os.getloadavg()
    return result


if __name__ == "__main__":
    print(json.dumps(main(*map(int, sys.argv[1:])), indent=2))

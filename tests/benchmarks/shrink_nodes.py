"""Benchmark: nodes removed by certified shrinking at budgets of 1%, 5% and 10% of each model's
validation RMSE, and the instructions per prediction saved on an emulated Cortex-M4F (float32, the
default rational tanh) and Cortex-M0 (q15). Models: the demo fan model (200 nodes, trained as
``nodecast demo`` trains it) and Friedman #1 (sklearn make_friedman1, Friedman 1991; 5 inputs,
200 nodes) with the default ridge and with ridge 1e-2. Prints JSON; asserts nothing.

    python tests/benchmarks/shrink_nodes.py [--no-count]
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np

from nodecast.compiler.backends import render
from nodecast.compiler.instruction_count import count_instructions, counting_rows
from nodecast.compiler.passes.shrink import shrink_bundle
from nodecast.compiler.reference import predict

SHARES = (0.01, 0.05, 0.10)
COUNTS = {"cortex-m4f": {"precision": "float32"},
          "cortex-m0": {"precision": "q15", "out_of_domain": "clamp"}}


def _demo():
    from nodecast.cli.demo_scenario import write_data

    with tempfile.TemporaryDirectory() as tmp:
        from nodecast.cli.demo_scenario import DOMAIN, FEATURES, TARGET, UNITS
        from nodecast.compiler.csvio import read_table
        from nodecast.trainer.training import TrainingJob, train

        write_data(Path(tmp))
        job = TrainingJob(targets=(TARGET,), features=FEATURES, domain=DOMAIN, units=UNITS,
                          seed=0, params={"n_nodes": 200})
        bundle = train(read_table(Path(tmp) / "readings.csv"), job)
    return bundle, bundle.metadata["metrics"]["validation"]["rmse"][0]


def _friedman(ridge):
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(2500, n_features=5, noise=1.0, random_state=0)
    params = {} if ridge is None else {"ridge": ridge}
    model = RandomNodeRegressor(n_nodes=200, random_state=0, **params).fit(X[:2000], y[:2000])
    bundle = to_bundle(model, feature_names=[f"x{i}" for i in range(5)], target_names=["y"])
    rmse = float(np.sqrt(np.mean((predict(bundle.network, X[2000:])[:, 0] - y[2000:]) ** 2)))
    return bundle, rmse


def _instructions(bundle) -> dict:
    rows = counting_rows(bundle.network)[:32]
    figures = {}
    for core, options in COUNTS.items():
        artifact = render(bundle, "c", prefix="model", **options)
        info = {"prefix": "model", "precision": options["precision"],
                "n_inputs": bundle.network.n_features}
        figures[core] = float(np.median(count_instructions(artifact.files, info, rows, core)))
    return figures


def _entry(bundle, rmse: float, count: bool) -> dict:
    entry = {"nodes": bundle.network.n_nodes, "validation_rmse": rmse,
             "max_abs_output_weight": float(np.max(np.abs(bundle.network.output_weights
                                                          * bundle.network.output_scale)))}
    before = _instructions(bundle) if count else None
    if before:
        entry["instructions"] = before
    for share in SHARES:
        start = time.perf_counter()
        small, result = shrink_bundle(bundle, share * rmse)
        row = {"budget": share * rmse, "nodes_after": small.network.n_nodes,
               "removed": result.counts(), "certified_bound": max(result.error_bound, default=0.0),
               "seconds": time.perf_counter() - start}
        if before:
            after = _instructions(small)
            row["instructions_saved"] = {core: before[core] - after[core] for core in before}
        entry[f"{round(share * 100)}%"] = row
    return entry


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--no-count", action="store_true", help="Skip the emulated counts.")
    args = parser.parse_args()
    models = {"demo_fan": _demo(), "friedman1_default_ridge": _friedman(None),
              "friedman1_ridge_1e-2": _friedman(1e-2)}
    result = {name: _entry(bundle, rmse, not args.no_count)
              for name, (bundle, rmse) in models.items()}
    print(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

"""Verification speed on the demo's artifacts: every kind the demo emits, 10,000 quasi-random probes
each (plus the corner, near-bound and outside families), host only.

Prints JSON: per artifact kind, the whole ``verify`` call (describe, probes, tolerance, every
engine's run, comparison) and, per runtime engine, the time of its ``run`` alone; and
the sum over kinds (the figure the issue bounds at 30 s on this machine). Never asserts a time.
Run: python tests/benchmarks/verify_speed.py
"""

from __future__ import annotations

import json
import tempfile
import time
from pathlib import Path

import numpy as np

PROBES = 10_000
ARTIFACTS = {"onnx": "fan.onnx", "c": "fan_c", "python": "fan_predictor.py"}


def _timed(function):
    start = time.perf_counter()
    value = function()
    return value, time.perf_counter() - start


def _engine_times(bundle, path: Path) -> dict:
    from nodecast.compiler.verify.probes import probe_families
    from nodecast.compiler.verify.runners import detect_kind, runner

    module = runner(detect_kind(path))
    info = module.describe(path)
    X = np.vstack([f.X for f in probe_families(bundle.network, None, PROBES, 0)])
    times = {}
    for engine in info.get("engines") or [info["kind"]]:
        _, seconds = _timed(lambda e=engine: module.run(path, X, {**info, "engine": e}))
        times[engine] = round(seconds, 3)
    return {"rows": int(X.shape[0]), "run_seconds": times}


def demo_bundle(folder: Path):
    """The demo's model, trained exactly as ``nodecast demo`` trains it."""
    from nodecast.cli.demo_scenario import DOMAIN, FEATURES, TARGET, UNITS, write_data
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer.training import TrainingJob, train

    write_data(folder)
    job = TrainingJob(targets=(TARGET,), features=FEATURES, domain=DOMAIN, units=UNITS, seed=0,
                      params={"n_nodes": 200})
    return train(read_table(folder / "readings.csv"), job)


def main() -> None:
    from nodecast.compiler import emit
    from nodecast.compiler.verify import verify
    from nodecast.compiler.verify.runners import RUNNERS, available_kinds

    with tempfile.TemporaryDirectory() as folder:
        folder = Path(folder)
        bundle = demo_bundle(folder)
        result = {"probes": PROBES, "kinds": {}}
        for kind in RUNNERS:
            if kind not in available_kinds():
                result["kinds"][kind] = "back-end or runner not in this version"
                continue
            path = folder / ARTIFACTS[kind]
            emit(bundle, kind, path)
            report, seconds = _timed(lambda p=path: verify(bundle, p, count=PROBES))
            result["kinds"][kind] = {"verify_seconds": round(seconds, 3), "passed": report.passed,
                                     "precision": report.document["artifact"]["precision"],
                                     **_engine_times(bundle, path)}
        result["total_verify_seconds"] = round(sum(
            v["verify_seconds"] for v in result["kinds"].values() if isinstance(v, dict)), 3)
    print(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

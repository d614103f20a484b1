"""Certified bounds: CPU time against inputs and nodes, and tightness (certified bound over the
worst error an adversarial search finds in the real artifact) per model and artifact. Prints JSON.

    python tests/benchmarks/certify.py [--quick]

Models: the demo's default model (trained by `nodecast train` defaults on the demo data), an
ill-conditioned one (ridge 0, 800 nodes), and Friedman #1 (Friedman 1991, sklearn make_friedman1)
models of 5 and 10 inputs. Timing is process CPU time of one certify() call (imports excluded).
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

CONFIGS = [("c", "float32", "libm"), ("c", "float32", "rational"), ("c", "float32", "table"),
           ("c", "q15", "table"), ("c", "q31", "table"), ("onnx", "float32", None),
           ("python", "float64", None)]


def demo_bundles(folder: Path):
    from nodecast.cli import main
    from nodecast.compiler import load

    main(["demo", "--data-only", "-o", str(folder)])
    bundles = {}
    for name, extra in (("demo-default", []), ("demo-ridge0-800", ["--ridge", "0", "--nodes", "800"])):
        path = folder / f"{name}.ncast"
        try:
            main(["train", str(folder / "readings.csv"), "--target", "heatsink_temp", "-o", str(path),
                  *extra])
        except SystemExit as stop:
            if stop.code:
                raise
        bundles[name] = load(path)
    return bundles


def friedman_bundle(n_features: int, n_nodes: int):
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(4000, n_features=n_features, noise=1.0, random_state=0)
    model = RandomNodeRegressor(n_nodes=n_nodes, random_state=0).fit(X, y)
    return to_bundle(model, feature_names=[f"x{i}" for i in range(n_features)], target_names=["y"])


def timing(bundle) -> dict:
    from nodecast.compiler.bounds import certify

    net, result = bundle.network, {}
    total = 0.0
    for target, precision, impl in CONFIGS:
        start = time.process_time()
        certify(net, target, precision, activation_impl=impl)
        spent = time.process_time() - start
        total += spent
        result[f"{target}-{precision}-{impl or 'default'}"] = round(spent, 3)
    result["all"] = round(total, 3)
    return {"inputs": net.n_features, "nodes": net.n_nodes, "cpu_seconds": result}


def tightness(bundle, folder: Path, quick: bool) -> dict:
    from nodecast.compiler import emit
    from nodecast.compiler.bounds import certify
    from nodecast.compiler.bounds.search import find_worst
    from nodecast.compiler.reference import predict
    from nodecast.compiler.verify.runners import runner

    net, rows = bundle.network, {}
    reference = np.asarray(certify(net, "reference", "float64").per_output)
    for target, precision, impl in CONFIGS:
        options = {"precision": precision}
        if target == "c":
            options.update(activation_impl=impl, out_of_domain="clamp")
        path = folder / f"{target}-{precision}-{impl}" / {"c": "c", "onnx": "m.onnx",
                                                           "python": "p.py"}[target]
        path.parent.mkdir(parents=True, exist_ok=True)
        artifact = emit(bundle, target, path, **options)
        module = runner(target)
        info = module.describe(path)
        info["engine"] = "onnxruntime" if target == "onnx" else info["engines"][0]
        def error(X, module=module, path=path, info=info):
            return np.abs(module.run(path, X, info) - predict(net, X))

        worst = find_worst(error, net.domain_low, net.domain_high, seed=11,
                           random_points=5000 if quick else 100_000, starts=4 if quick else 8,
                           rounds=6 if quick else 10)
        bound = np.asarray(artifact.summary["certificate"]["certified_bound"])
        rows[f"{target}-{precision}-{impl or 'default'}"] = {
            "certified_bound": bound.tolist(), "worst_found": worst.values.tolist(),
            "sound": bool(np.all(worst.values <= bound + reference)),
            "ratio": (bound / np.maximum(worst.values, 1e-300)).round(2).tolist()}
    metrics = bundle.metadata.get("metrics", {}).get("validation", {}).get("rmse")
    return {"validation_rmse": metrics, "artifacts": rows}


def main() -> None:
    quick = "--quick" in sys.argv
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        bundles = demo_bundles(folder)
        bundles["friedman-5x200"] = friedman_bundle(5, 200)
        bundles["friedman-10x1000"] = friedman_bundle(10, 1000)
        result = {"timing": {key: timing(b) for key, b in bundles.items()},
                  "tightness": {key: tightness(b, folder / key, quick) for key, b in bundles.items()
                                if key != "friedman-10x1000" or not quick}}
    print(json.dumps(result, indent=2))


if __name__ == "__main__":
    main()

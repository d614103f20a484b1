"""Benchmark: q15/q31 C artifacts with per-node against per-layer fixed-point scales. For each model:
its test RMSE, each artifact's test RMSE and their ratio (issue 20's rule: at most 1.05), the
certified bound and the worst error an adversarial search finds on the artifact (tightness =
worst / bound). Prints JSON; asserts nothing. Models: default `train` settings on scikit-learn's
diabetes data (Efron et al. 2004), on a synthetic set with one steep region (a tanh step of slope
200, our own), and the demo bundle when its folder is given (`nodecast demo -o DIR` first).

    python tests/benchmarks/fixed_scales.py [DEMO_DIR]
"""

from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

import numpy as np

from nodecast.compiler import emit, load, reference
from nodecast.compiler.bounds import certify
from nodecast.compiler.bounds.search import find_worst
from nodecast.compiler.verify.runners import c as c_runner


def _steep(rows=3000, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-1.0, 1.0, (rows, 2))
    y = np.tanh(200.0 * (X[:, 0] - 0.3)) + 0.5 * np.sin(2.0 * X[:, 1])
    return X, y + 0.05 * rng.standard_normal(rows)


def _trained(X, y):
    from sklearn.model_selection import train_test_split

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.25, random_state=0)
    model = RandomNodeRegressor(random_state=0).fit(X_train, y_train)
    names = [f"x{i}" for i in range(X.shape[1])]
    return to_bundle(model, feature_names=names, target_names=["y"]), X_test, y_test


def _models(demo: Path | None):
    from sklearn.datasets import load_diabetes

    data = load_diabetes()
    yield "diabetes", _trained(data.data, data.target)
    yield "steep", _trained(*_steep())
    if demo is not None:
        table = np.genfromtxt(demo / "held_out.csv", delimiter=",", skip_header=1)
        yield "demo", (load(demo / "fan.ncast"), table[:, :-1], table[:, -1])


def _rmse(a, b) -> float:
    return float(np.sqrt(np.mean((np.asarray(a) - np.asarray(b)) ** 2)))


def _figures(bundle, X_test, y_test, precision: str, scales: str, folder: Path) -> dict:
    net = bundle.network
    artifact = emit(bundle, "c", folder, overwrite=True, precision=precision,
                    out_of_domain="clamp", scales=scales)
    info = c_runner.describe(folder)

    def error(X):
        return np.abs(c_runner.run(folder, X, info) - reference.predict(net, X))

    worst = find_worst(error, net.domain_low, net.domain_high, seed=3, random_points=4000,
                       starts=3, rounds=5, steps=32)
    bound = max(artifact.summary["certificate"]["certified_bound"])
    got = c_runner.run(folder, X_test, info)[:, 0]
    model_rmse = _rmse(reference.predict(net, X_test)[:, 0], y_test)
    return {"model_test_rmse": model_rmse, "artifact_test_rmse": _rmse(got, y_test),
            "ratio": _rmse(got, y_test) / model_rmse, "certified_bound": bound,
            "worst_found": float(np.max(worst.values)),
            "tightness": float(np.max(worst.values)) / bound,
            "reference_bound": certify(net, "reference", "float64").worst}


def main() -> None:
    demo = Path(sys.argv[1]) if len(sys.argv) > 1 else None
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, (bundle, X_test, y_test) in _models(demo):
            for precision in ("q15", "q31"):
                for scales in ("layer", "node"):
                    results[f"{name}/{precision}/{scales}"] = _figures(
                        bundle, X_test, y_test, precision, scales, Path(tmp) / "c")
    print(json.dumps(results, indent=1))


if __name__ == "__main__":
    main()

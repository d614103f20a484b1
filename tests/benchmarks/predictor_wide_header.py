"""Time of the standalone predictor on one row under a header of 40,000 extra columns (the
duplicate-header check was quadratic). Prints JSON; never asserts a time.
Run: python tests/benchmarks/predictor_wide_header.py
"""

from __future__ import annotations

import json
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np


def main() -> None:
    from nodecast.compiler import emit
    from nodecast.compiler.bundle import Bundle
    from nodecast.compiler.ir import Network

    rng = np.random.default_rng(0)
    net = Network(hidden_weights=rng.normal(size=(20, 2)), hidden_biases=rng.normal(size=20),
                  activation="tanh", output_weights=rng.normal(size=(20, 1)), output_bias=[0.0],
                  input_offset=np.zeros(2), input_scale=np.ones(2), output_offset=[0.0],
                  output_scale=[1.0], domain_low=-np.ones(2), domain_high=np.ones(2),
                  feature_names=("a", "b"), target_names=("y",))
    results = {}
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "p.py"
        emit(Bundle(net, {}), "python", path)
        for extra in (10_000, 40_000):
            names = [f"c{i}" for i in range(extra)]
            text = ",".join(["a", "b"] + names) + "\n" + ",".join(["0.1", "0.2"] + ["0"] * extra)
            start = time.perf_counter()
            subprocess.run([sys.executable, "-I", "-S", str(path)], input=text + "\n", text=True,
                           capture_output=True, check=True)
            results[f"{extra}_extra_columns_s"] = round(time.perf_counter() - start, 3)
    print(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()

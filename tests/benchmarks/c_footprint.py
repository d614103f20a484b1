"""Benchmark: flash, RAM and stack of the generated C for a Cortex-M0 (no FPU) and a Cortex-M4F,
for a 10-input, 100-node model in q15 (and, for comparison, q31 and libm-free float32). Prints
JSON; asserts nothing. Code beyond the weight tables is the .text section of the model's object.

    python tests/benchmarks/c_footprint.py
"""

from __future__ import annotations

import json

from nodecast.compiler.backends import render
from nodecast.compiler.toolchain import footprint
from nodecast.trainer import RandomNodeRegressor, to_bundle

VARIANTS = {"q15": {"precision": "q15", "out_of_domain": "clamp"},
            "q31": {"precision": "q31", "out_of_domain": "clamp"},
            "float32-rational": {"precision": "float32", "activation_impl": "rational"},
            "float32-table": {"precision": "float32", "activation_impl": "table"}}


def _bundle():
    from sklearn.datasets import make_friedman1  # Friedman (1991) #1, 10 inputs

    X, y = make_friedman1(2000, n_features=10, noise=1.0, random_state=0)
    return to_bundle(RandomNodeRegressor(n_nodes=100, random_state=0).fit(X, y))


def main() -> None:
    bundle = _bundle()
    result = {"n_features": 10, "nodes": 100}
    for name, options in VARIANTS.items():
        artifact = render(bundle, "c", **options)
        figures = footprint(artifact.files, "model")
        entry = {"weights_and_tables_bytes": artifact.summary["weight_bytes"],
                 "scratch_bytes": artifact.summary["scratch_bytes"],
                 "estimate": artifact.summary["estimate"]["max_abs_error"]}
        for build in ("cortex-m0", "cortex-m4f", "host"):
            sizes = figures[build]
            if "skipped" in sizes:
                entry[build] = sizes
                continue
            entry[build] = {"flash_bytes": sizes["text"] + sizes["data"],
                            "ram_bytes": sizes["data"] + sizes["bss"],
                            "stack_bytes": sizes["stack"],
                            "code_beyond_tables_bytes": sizes["code"],
                            "external_calls": sizes["calls"], "flags": sizes["flags"]}
        result[name] = entry
    print(json.dumps(result, indent=2, sort_keys=True))


if __name__ == "__main__":
    main()

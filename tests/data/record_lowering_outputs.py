"""Record what every artifact of the demo model computes on verify's probes, as SHA-256 digests.

Run once before a refactoring of the lowering (``python tests/data/record_lowering_outputs.py``);
tests/compiler/test_lowering_unchanged.py recomputes the digests after it, so an artifact that
computes anything different, by one bit, fails. The digests were recorded at commit 8ff5fd1.
"""

from __future__ import annotations

import hashlib
import json
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
BUNDLE = HERE / "demo_fan.ncast"
DIGESTS = HERE / "demo_fan_outputs.json"

# (target, options): every precision and activation implementation of every target
CONFIGS = [("python", {"precision": "float64"})]
CONFIGS += [("onnx", {"precision": p}) for p in ("float32", "float64")]
CONFIGS += [("c", {"precision": p, "activation_impl": a}) for p in ("float32", "float64")
            for a in ("libm", "rational", "table")]
CONFIGS += [("c", {"precision": p, "out_of_domain": "clamp"}) for p in ("q15", "q31")]
CONFIGS += [("c", {"precision": "float32", "activation_impl": "table", "table_size": 64})]

# options that select today's behaviour where a later change made another one the default
EXTRA: dict[str, dict] = {}


def config_name(target: str, options: dict) -> str:
    return target + "".join(f" {key}={value}" for key, value in sorted(options.items()))


def probes(net) -> np.ndarray:
    from nodecast.compiler.verify.probes import probe_families

    return np.concatenate([family.X for family in probe_families(net, count=512, seed=0)])


def digest(bundle, target: str, options: dict, folder: Path, extra: dict | None = None) -> str:
    from nodecast.compiler import emit
    from nodecast.compiler.verify.runners import runner

    path = folder / ("model.onnx" if target == "onnx" else "predictor.py" if target == "python"
                     else "model_c")
    emit(bundle, target, path, overwrite=True, **options, **(extra or {}))
    module = runner(target)
    info = module.describe(path)
    outputs = np.ascontiguousarray(module.run(path, probes(bundle.network), info), dtype=np.float64)
    return hashlib.sha256(outputs.tobytes()).hexdigest()


def main() -> int:
    from nodecast.compiler import load

    bundle = load(BUNDLE)
    with tempfile.TemporaryDirectory() as folder:
        digests = {config_name(t, o): digest(bundle, t, o, Path(folder), EXTRA.get(t))
                   for t, o in CONFIGS}
    DIGESTS.write_text(json.dumps(digests, indent=1, sort_keys=True) + "\n")
    print(json.dumps(digests, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())

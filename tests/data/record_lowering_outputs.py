"""Record what every artifact of the committed test bundles computes on verify's probes, as SHA-256
digests of the outputs.

Run once before a refactoring of the lowering (``python tests/data/record_lowering_outputs.py``);
tests/compiler/test_lowering_unchanged.py recomputes the digests after it, so an artifact that
computes anything different, by one bit, fails. The digests were recorded at commit 8ff5fd1 (before
the lowering was reorganised into passes) from these bundles:

* ``demo_fan.ncast``: the built-in demo's model (4 inputs, 200 logistic nodes);
* ``wide12.ncast``: 12 inputs (more than the 10 whose every corner is probed), 2 outputs, tanh;
* ``levels.ncast``: a classifier with a categorical input (level tables in every artifact).

ONNX float32 results depend on onnxruntime's kernels and C libm results on the C library, so those
digests hold for the versions recorded in ``environment``; the test skips them elsewhere.
"""

from __future__ import annotations

import hashlib
import json
import platform
import sys
import tempfile
from pathlib import Path

import numpy as np

HERE = Path(__file__).parent
DIGESTS = HERE / "recorded_outputs.json"

# (target, options): every precision and activation implementation of every target
DEMO = [("python", {"precision": "float64"})]
DEMO += [("onnx", {"precision": p}) for p in ("float32", "float64")]
DEMO += [("c", {"precision": p, "activation_impl": a}) for p in ("float32", "float64")
         for a in ("libm", "rational", "table")]
DEMO += [("c", {"precision": p, "out_of_domain": "clamp"}) for p in ("q15", "q31")]
DEMO += [("c", {"precision": "float32", "activation_impl": "table", "table_size": 64})]
WIDE = [("python", {"precision": "float64"}), ("onnx", {"precision": "float32"}),
        ("c", {"precision": "float32", "activation_impl": "rational"}),
        ("c", {"precision": "q15", "out_of_domain": "clamp"})]
LEVELS = [("python", {"precision": "float64", "out_of_domain": "reject"}),
          ("onnx", {"precision": "float64"}),
          ("c", {"precision": "float32", "activation_impl": "table"})]
BUNDLES = {"demo_fan": DEMO, "wide12": WIDE, "levels": LEVELS}
CONFIGS = [(bundle, target, options) for bundle, configs in BUNDLES.items()
           for target, options in configs]

# options that select the recorded behaviour where a later change made another one the default
# (q31/q15: per-layer fixed-point scales, the integers of commit 8ff5fd1; per-node is the default
# since issue 20; float C artifacts take no scales)
# (by precision): fixed point as one Q format per layer, the only scheme 8ff5fd1 had
EXTRA: dict[str, dict] = {"q15": {"scales": "layer"}, "q31": {"scales": "layer"}}


def config_name(bundle: str, target: str, options: dict) -> str:
    prefix = "" if bundle == "demo_fan" else f"{bundle}: "
    return prefix + target + "".join(f" {key}={value}" for key, value in sorted(options.items()))


def depends_on_environment(target: str, options: dict) -> bool:
    """ONNX float32 (onnxruntime's kernels) and C libm (the C library's tanh)."""
    return (target == "onnx" and options.get("precision") == "float32") or \
        options.get("activation_impl") == "libm"


def environment() -> dict:
    import onnxruntime

    return {"onnxruntime": onnxruntime.__version__, "libc": " ".join(platform.libc_ver()),
            "machine": platform.machine()}


def probes(net) -> np.ndarray:
    from nodecast.compiler.verify.probes import probe_families

    return np.concatenate([family.X for family in probe_families(net, count=512, seed=0)])


def digest(bundle, target: str, options: dict, folder: Path, extra: dict | None = None) -> str:
    from nodecast.compiler import emit
    from nodecast.compiler.verify.runners import runner

    path = folder / ("model.onnx" if target == "onnx" else "predictor.py" if target == "python"
                     else "model_c")
    extra = {key: value for key, value in (extra or {}).items()
             if key != "scales" or options.get("precision") in ("q15", "q31")}
    emit(bundle, target, path, overwrite=True, **options, **extra)
    module = runner(target)
    info = module.describe(path)
    outputs = np.ascontiguousarray(module.run(path, probes(bundle.network), info), dtype=np.float64)
    return hashlib.sha256(outputs.tobytes()).hexdigest()


def main() -> int:
    from nodecast.compiler import load

    recorded = json.loads(DIGESTS.read_text()) if DIGESTS.is_file() else {}
    digests = recorded.get("digests", {})
    with tempfile.TemporaryDirectory() as folder:
        for name, target, options in CONFIGS:
            bundle = load(HERE / f"{name}.ncast")
            digests[config_name(name, target, options)] = digest(
                bundle, target, options, Path(folder), EXTRA.get(options["precision"]))
    document = {"environment": environment(), "digests": digests}
    DIGESTS.write_text(json.dumps(document, indent=1, sort_keys=True) + "\n")
    print(json.dumps(document, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())

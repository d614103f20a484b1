"""Every example runs with its one command and does what it says."""

from __future__ import annotations

import csv
import json
import subprocess
from pathlib import Path

import numpy as np

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def _run(script: str, out: Path) -> subprocess.CompletedProcess:
    result = subprocess.run(["bash", str(EXAMPLES / script), str(out)], capture_output=True,
                            text=True, timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return result


def test_onnx_handoff_consumer_matches_the_reference(tmp_path):
    from nodecast.compiler import load, reference
    from nodecast.compiler.csvio import read_table

    _run("onnx_handoff/run.sh", tmp_path)
    assert json.loads((tmp_path / "verify.json").read_text())["passed"] is True
    with open(tmp_path / "predictions.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == ["heatsink_temp"]
    bundle = load(tmp_path / "fan.ncz")
    X = read_table(tmp_path / "held_out.csv").numbers(bundle.network.feature_names)
    got = np.array([float(r[0]) for r in rows[1:]])
    want = reference.predict(bundle.network, X)[:, 0]
    report = json.loads((tmp_path / "verify.json").read_text())
    assert np.max(np.abs(got - want)) <= max(report["tolerance"]["per_output"])

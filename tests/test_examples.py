"""Every example runs with its one command and does what it says."""

from __future__ import annotations

import csv
import json
import subprocess
from pathlib import Path

import numpy as np
import pytest

pytestmark = pytest.mark.slow  # each example runs whole, in its own process

EXAMPLES = Path(__file__).resolve().parents[1] / "examples"


def _run(script: str, out: Path) -> subprocess.CompletedProcess:
    result = subprocess.run(["bash", str(EXAMPLES / script), str(out)], capture_output=True,
                            text=True, timeout=900)
    assert result.returncode == 0, result.stdout[-3000:] + result.stderr[-3000:]
    return result


@pytest.mark.slow
def test_onnx_handoff_consumer_matches_the_reference(tmp_path):
    from nodecast.compiler import load, reference
    from nodecast.compiler.csvio import read_table

    _run("onnx_handoff/run.sh", tmp_path)
    assert json.loads((tmp_path / "verify.json").read_text())["passed"] is True
    with open(tmp_path / "predictions.csv", newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0] == ["heatsink_temp"]
    bundle = load(tmp_path / "fan.ncast")
    X = read_table(tmp_path / "held_out.csv").numbers(bundle.network.feature_names)
    got = np.array([float(r[0]) for r in rows[1:]])
    want = reference.predict(bundle.network, X)[:, 0]
    report = json.loads((tmp_path / "verify.json").read_text())
    assert np.max(np.abs(got - want)) <= max(report["tolerance"]["per_output"])


@pytest.fixture(scope="module")
def plots_out(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("plots")
    _run("plots/run.sh", out)
    return out


@pytest.mark.slow
def test_plots_example_draws_both_pictures(plots_out):
    for name in ("nodes.png", "predicted_vs_actual.png"):
        data = (plots_out / name).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000  # PNG signature (ISO 15948)


def test_data_driven_nodes_are_all_steep_somewhere_on_the_domain(plots_out):
    from nodecast.compiler import load
    from nodecast.compiler.inspection import node_ranges

    bundle = load(plots_out / "fan.ncast")
    # data-driven nodes put their inflection at a training point, so each is steep somewhere
    ranges = node_ranges(bundle)
    assert ranges["saturated"] == 0
    assert all(lo <= 0.0 <= hi for lo, hi in zip(ranges["z_low"], ranges["z_high"], strict=True))


@pytest.mark.slow
def test_ci_gate_passes_then_refuses_a_worse_model(tmp_path):
    import xml.etree.ElementTree as ET

    _run("ci/model_gate.sh", tmp_path)
    junit = sorted(p.name for p in (tmp_path / "junit").glob("*.xml"))
    assert "score.xml" in junit and "pytest.xml" in junit
    assert any(name.startswith("verify-candidate_predictor") for name in junit)
    worse = tmp_path / "worse.ncast"
    subprocess.run(["nodecast", "train", str(tmp_path / "readings.csv"), "--target", "heatsink_temp",
                    "--nodes", "8", "-o", str(worse)], check=True, capture_output=True)
    result = subprocess.run(["nodecast", "score", str(worse), str(tmp_path / "held_out.csv"),
                             "--baseline", str(tmp_path / "candidate.ncast"), "--junit",
                             str(tmp_path / "worse.xml")], capture_output=True, text=True)
    assert result.returncode == 1
    suite = ET.parse(tmp_path / "worse.xml").getroot()
    assert int(suite.get("failures") or suite.find("testsuite").get("failures")) >= 1


@pytest.mark.slow
def test_standalone_predictor_runs_isolated_and_matches_the_reference(tmp_path):
    from nodecast.compiler import load, reference
    from nodecast.compiler.csvio import read_table

    _run("standalone_predictor/run.sh", tmp_path)
    bundle = load(tmp_path / "fan.ncast")
    X = read_table(tmp_path / "held_out.csv").numbers(bundle.network.feature_names)
    got = read_table(tmp_path / "predictions.csv").numbers(["heatsink_temp"])[:, 0]
    want = reference.predict(bundle.network, X)[:, 0]
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(want)  # SPEC: float64 artifacts


@pytest.mark.slow
def test_firmware_example_runs_on_emulated_cortex_m4_within_the_bound(tmp_path):
    import os
    import shutil

    missing = [tool for tool in ("arm-none-eabi-gcc", "qemu-system-arm", "make")
               if shutil.which(tool) is None]
    if missing:
        if os.environ.get("CI") == "true":
            raise AssertionError(f"CI must install {', '.join(missing)} (see .ci/run)")
        pytest.skip(f"needs {', '.join(missing)}")
    result = _run("firmware/run.sh", tmp_path)
    assert "within the bound" in result.stdout
    assert json.loads((tmp_path / "verify_m4.json").read_text())["passed"] is True
    lines = (tmp_path / "firmware" / "results.txt").read_text().split("\n")
    assert len([line for line in lines if line.startswith("0 ")]) == 16  # every reading accepted
    assert "cortex-m0" in result.stderr  # emit printed the footprint table


@pytest.mark.slow
def test_python_api_example_exports_a_tuned_pipeline_that_every_artifact_computes(tmp_path):
    from nodecast.compiler import load, reference
    from nodecast.compiler.csvio import read_table

    _run("python_api/run.sh", tmp_path)
    summary = json.loads((tmp_path / "summary.json").read_text())
    bundle = load(tmp_path / "fan.ncast")
    assert summary["bundle_id"] == bundle.bundle_id
    assert bundle.metadata["pipeline"][0].endswith("StandardScaler")
    assert bundle.network.feature_names == ("ambient_temp", "fan_speed", "load_current",
                                            "supply_voltage")  # the DataFrame's columns
    for target in ("python", "onnx", "c"):
        assert 0 <= summary[target]["max_abs_error"] <= summary[target]["tolerance"]
    X = read_table(tmp_path / "held_out.csv").numbers(bundle.network.feature_names)
    got = read_table(tmp_path / "predictions.csv").numbers(["heatsink_temp"])[:, 0]
    want = reference.predict(bundle.network, X)[:, 0]
    assert np.max(np.abs(got - want)) <= 1e-10 * np.ptp(want)  # SPEC: float64 artifacts

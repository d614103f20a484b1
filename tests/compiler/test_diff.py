"""``nodecast diff``: the model-change gate, through the CLI."""

from __future__ import annotations

import json
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from nodecast.compiler import load, reference
from tests.helpers import cli_status, run_cli


def _write(path, header, rows):
    path.write_text(",".join(header) + "\n" + "".join(",".join(map(repr, r)) + "\n" for r in rows),
                    encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def models(tmp_path_factory):
    """Two trainings of a 2-input model that differ only in the seed, and labelled held-out rows."""
    folder = tmp_path_factory.mktemp("diff")
    rng = np.random.default_rng(1)

    def rows(n):
        X = rng.random((n, 2)) * [4.0, 2.0] - [2.0, 1.0]
        return [[float(a), float(b), float(np.sin(2 * a) * np.cos(3 * b) + 0.1 * a * b)] for a, b in X]

    data = _write(folder / "train.csv", ["p", "q", "z"], rows(300))
    held = _write(folder / "held.csv", ["p", "q", "z"], rows(200))
    for seed in (1, 2):
        code = cli_status("train", data, "--target", "z", "--nodes", "40", "--seed", seed,
                             "--domain", "p=-2:2,q=-1:1", "-o", folder / f"s{seed}.ncast")
        assert code == 0
    code = cli_status("train", data, "--target", "z", "--nodes", "40", "--seed", 1,
                         "--domain", "p=-2:2.5,q=-1:1", "-o", folder / "wider.ncast")
    assert code == 0
    return {"folder": folder, "data": data, "held": held, "s1": folder / "s1.ncast",
            "s2": folder / "s2.ncast", "wider": folder / "wider.ncast"}



def test_a_model_compared_with_itself_changes_by_zero(capsys, models, tmp_path):
    report = tmp_path / "d.json"
    status, out, err = run_cli(capsys, "diff", models["s1"], models["s1"], "--data", models["held"],
                               "--max-change", "0", "--report", report)
    assert status == 0, err
    doc = json.loads(report.read_text())
    assert doc["passed"] and doc["domain"]["same"]
    assert doc["search"]["per_output"][0]["max_abs_change"] == 0.0
    assert doc["data"]["per_output"][0]["max_abs_change"] == 0.0
    assert doc["data"]["metrics"]["delta"]["z"]["rmse"] == 0.0
    assert "diff PASSED" in out


def test_search_finds_at_least_95_percent_of_a_dense_grids_largest_change(capsys, models, tmp_path):
    report = tmp_path / "d.json"
    status, _, err = run_cli(capsys, "diff", models["s1"], models["s2"], "--report", report)
    assert status == 0, err  # no gate asked for: a report only
    found = json.loads(report.read_text())["search"]["per_output"][0]
    old, new = load(models["s1"]).network, load(models["s2"]).network
    p, q = np.meshgrid(np.linspace(-2, 2, 801), np.linspace(-1, 1, 401))
    grid = np.column_stack([p.ravel(), q.ravel()])
    grid_max = np.max(np.abs(reference.predict(new, grid) - reference.predict(old, grid)))
    assert grid_max > 1e-3  # two seeds really differ
    assert found["max_abs_change"] >= 0.95 * grid_max
    # the reported change is one the models really make, at a point inside the domain
    at = np.array([found["at"]])
    assert np.all(at >= [-2, -1]) and np.all(at <= [2, 1])
    real = abs(reference.predict(new, at)[0, 0] - reference.predict(old, at)[0, 0])
    assert real == pytest.approx(found["max_abs_change"], rel=1e-12)


def test_max_change_is_a_gate_with_json_and_junit_reports(capsys, models, tmp_path):
    from sklearn.metrics import mean_squared_error  # reference metric (scikit-learn)

    report, junit = tmp_path / "d.json", tmp_path / "d.xml"
    status, out, _ = run_cli(capsys, "diff", models["s1"], models["s2"], "--data", models["held"],
                             "--max-change", "1e-6", "--report", report, "--junit", junit)
    assert status == 1 and "diff FAILED" in out
    doc = json.loads(report.read_text())
    gate = {g["name"]: g for g in doc["gates"]}["max-change:z"]
    assert not gate["passed"] and gate["value"] >= doc["search"]["per_output"][0]["max_abs_change"]
    root = ET.fromstring(junit.read_bytes())  # the common JUnit layout (common practice)
    assert root.get("failures") == "1"
    held = np.loadtxt(models["held"], delimiter=",", skiprows=1)
    rmse = [mean_squared_error(held[:, 2], reference.predict(load(m).network, held[:, :2])[:, 0]) ** 0.5
            for m in (models["s1"], models["s2"])]
    assert doc["data"]["metrics"]["delta"]["z"]["rmse"] == pytest.approx(rmse[1] - rmse[0], rel=1e-9)
    # a limit above the change passes
    limit = repr(2 * gate["value"])
    status, out, _ = run_cli(capsys, "diff", models["s1"], models["s2"], "--data", models["held"],
                             "--max-change", limit, "--report", report, "--overwrite")
    assert status == 0 and "diff PASSED" in out


def test_a_changed_domain_is_reported_first_and_fails_the_gate(capsys, models):
    status, out, _ = run_cli(capsys, "diff", models["s1"], models["wider"], "--max-change", "100")
    assert status == 1
    lines = out.splitlines()
    assert lines[1].startswith("domain CHANGED") and "p: -2.0 .. 2.0 -> -2.0 .. 2.5" in lines[2]
    assert "gate domain: 1 vs limit 0 FAILED" in out


def test_models_of_different_inputs_are_refused_in_one_line(capsys, models, tmp_path):
    rows = [[float(a), float(a) ** 2] for a in np.linspace(0, 1, 30)]
    data = _write(tmp_path / "o.csv", ["r", "z"], rows)
    assert cli_status("train", data, "--target", "z", "--nodes", "5", "-o", tmp_path / "o.ncast") == 0
    capsys.readouterr()
    status, out, err = run_cli(capsys, "diff", models["s1"], tmp_path / "o.ncast")
    assert status == 2 and out == "" and len(err.strip().splitlines()) == 1
    assert "different inputs" in err
    status, _, err = run_cli(capsys, "diff", models["s1"], models["s2"], "--max-change", "-1")
    assert status == 2 and "--max-change" in err

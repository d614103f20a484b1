"""Everyday use through the CLI (issue 19): the README's commands, usage errors, outputs checked before
the work, classification on a continuous target, wording of generated comments and verify rows."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import numpy as np
import pytest

from nodecast.cli import main
from nodecast.cli.demo_scenario import DOMAIN, FEATURES
from nodecast.cli.parsing import parse_domain
from tests.helpers import run_cli, write_csv

ROOT = Path(__file__).resolve().parents[1]




@pytest.fixture(scope="module")
def small(tmp_path_factory):
    """A 60-row, 2-input regression table and a 20-node bundle trained on it."""
    folder = tmp_path_factory.mktemp("small")
    rng = np.random.default_rng(3)
    X = rng.random((60, 2))
    data = write_csv(folder / "d.csv", ["a", "b", "y"],
                [[float(a), float(b), float(np.sin(3 * a) + b)] for a, b in X])
    main_args = ["train", str(data), "--target", "y", "--nodes", "20", "-o", str(folder / "m.ncast")]
    try:
        main(main_args)
    except SystemExit as exc:
        assert exc.code == 0
    return {"folder": folder, "data": data, "bundle": folder / "m.ncast"}


def _readme_commands(name: str) -> list[list[str]]:
    """The README's shell commands running ``nodecast NAME`` (continuation lines joined)."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    commands = []
    for block in re.findall(r"```sh\n(.*?)```", text, flags=re.S):
        for line in block.replace("\\\n", " ").splitlines():
            words = shlex.split(line, comments=True)
            if words[:2] == ["nodecast", name]:
                commands.append(words)
    return commands


def test_readme_training_commands_declare_the_machines_domain_not_the_datas():
    commands = _readme_commands("select") + _readme_commands("train")
    assert commands
    for words in commands:
        assert "--domain" in words, words
        domain = parse_domain(words[words.index("--domain") + 1])
        assert set(domain) == set(FEATURES)
        for name in FEATURES:  # the demo scenario's declared operating range covers the data's
            assert domain[name][0] <= DOMAIN[name][0] and domain[name][1] >= DOMAIN[name][1]


def test_readme_firmware_domain_lets_a_cold_idle_machine_through(capsys, tmp_path):
    # the README's --domain gives a bundle whose ambient_temp starts at 10 degC exactly, so the
    # rejecting firmware accepts a cold machine (the data's own minimum is above 10)
    (words,) = _readme_commands("select")
    domain = words[words.index("--domain") + 1]
    assert run_cli(capsys, "demo", "--data-only", "-o", tmp_path)[0] == 0
    status, _, err = run_cli(capsys, "train", tmp_path / "readings.csv", "--target", "heatsink_temp",
                             "--domain", domain, "--nodes", "30", "-o", tmp_path / "fan.ncast")
    assert status == 0, err
    from nodecast.compiler import load

    net = load(tmp_path / "fan.ncast").network
    data_min = np.loadtxt(tmp_path / "readings.csv", delimiter=",", skiprows=1)[:, 0].min()
    assert data_min > 10.0 and net.domain_low[0] == 10.0


@pytest.mark.parametrize("args, words", [
    (["train", "x.csv", "-o", "m.ncast"], ["Missing option '--target'", "nodecast train --help"]),
    (["train", "x.csv", "--target", "y", "--nodes", "0", "-o", "m.ncast"], ["--nodes", "0"]),
    (["frobnicate"], ["No such command 'frobnicate'"]),
    (["emit", "m.ncast", "--to", "java", "-o", "x"], ["--to", "'java'"]),
])
def test_usage_errors_are_one_line_with_exit_2(capsys, args, words):
    status, out, err = run_cli(capsys, *args)
    assert status == 2 and out == ""
    assert len(err.strip().splitlines()) == 1, err
    assert err.startswith("nodecast: error: ") and "Usage:" not in err
    for word in words:
        assert word in err


def test_select_refuses_existing_outputs_before_searching(capsys, small, monkeypatch):
    import nodecast.trainer.selection_run as selection_run

    def must_not_run(*args, **kwargs):
        raise AssertionError("the search ran although an output exists")

    monkeypatch.setattr(selection_run, "run_selection", must_not_run)
    folder = small["folder"]
    existing = folder / "old.json"
    existing.write_text("{}")
    base = ["select", small["data"], "--target", "y", "--nodes", "10", "--folds", "2"]
    for extra in (["-o", small["bundle"]], ["-o", folder / "new.ncast", "--report", existing],
                  ["-o", folder / "new.ncast", "--plot", existing]):
        status, _, err = run_cli(capsys, *base, *extra)
        assert status == 2 and "already exists" in err and "--overwrite" in err, err
    assert existing.read_text() == "{}" and not (folder / "new.ncast").exists()


def test_select_report_is_replaced_only_with_overwrite(capsys, small, tmp_path):
    report = tmp_path / "cv.json"
    report.write_text("old")
    args = ["select", small["data"], "--target", "y", "--nodes", "10", "--folds", "2",
            "-o", tmp_path / "s.ncast", "--report", report]
    assert run_cli(capsys, *args)[0] == 2 and report.read_text() == "old"
    status, _, err = run_cli(capsys, *args, "--overwrite")
    assert status == 0, err
    assert report.read_text().startswith("{")


@pytest.mark.parametrize("command", ["verify", "score"])
def test_verify_and_score_reports_need_overwrite_to_replace_a_file(capsys, small, tmp_path, command):
    from nodecast.compiler import emit, load

    junit = tmp_path / "old.xml"
    junit.write_text("keep me")
    if command == "verify":
        artifact = tmp_path / "m.py"
        emit(load(small["bundle"]), "python", artifact)
        args = ["verify", small["bundle"], artifact, "--probes", "16", "--junit", junit]
    else:
        args = ["score", small["bundle"], small["data"], "--junit", junit]
    status, out, err = run_cli(capsys, *args)
    assert status == 2 and out == "" and "already exists" in err
    assert junit.read_text() == "keep me"
    status, _, err = run_cli(capsys, *args, "--overwrite")
    assert status == 0, err
    assert junit.read_text().startswith("<?xml")


def test_classification_of_a_continuous_target_is_refused_in_one_line(capsys, small, tmp_path):
    status, out, err = run_cli(capsys, "train", small["data"], "--target", "y", "--task",
                               "classification", "-o", tmp_path / "c.ncast")
    assert status == 2 and not (tmp_path / "c.ncast").exists()
    assert len(err.strip().splitlines()) == 1 and "Warning" not in err and ".py:" not in err
    assert "60 distinct labels in 60 rows" in err and "--task regression" in err


@pytest.mark.filterwarnings("error")
def test_classification_with_two_rows_per_class_still_trains(capsys, tmp_path):
    rng = np.random.default_rng(0)
    X = rng.random((40, 2))
    rows = [[float(a), float(b), float(i % 20)] for i, (a, b) in enumerate(X)]  # 20 classes x 2
    data = write_csv(tmp_path / "c.csv", ["a", "b", "label"], rows)
    status, _, err = run_cli(capsys, "train", data, "--target", "label", "--task", "classification",
                             "--nodes", "10", "-o", tmp_path / "c.ncast")
    assert status == 0, err


def test_fixed_point_header_names_the_real_function(capsys, tmp_path):
    from nodecast.compiler import emit, load

    assert run_cli(capsys, "demo", "--data-only", "-o", tmp_path)[0] == 0
    assert run_cli(capsys, "train", tmp_path / "readings.csv", "--target", "heatsink_temp",
                   "--nodes", "20", "-o", tmp_path / "fan.ncast")[0] == 0
    artifact = emit(load(tmp_path / "fan.ncast"), "c", precision="q15", prefix="fan",
                    out_of_domain="reject")
    header = artifact.files["fan.h"].decode()
    assert "fan_predict returns FAN_ERROR_OUT_OF_DOMAIN" in header
    assert "FAN_predict" not in header


def test_verify_row_of_rejected_outside_probes_says_how_many(capsys, small, tmp_path):
    status, _, _ = run_cli(capsys, "emit", small["bundle"], "--to", "python", "--out-of-domain",
                           "reject", "-o", tmp_path / "r.py")
    assert status == 0
    status, out, _ = run_cli(capsys, "verify", small["bundle"], tmp_path / "r.py", "--probes", "16")
    assert status == 0
    (row,) = [line for line in out.splitlines() if " outside " in line]
    count = int(row.split()[2])
    assert f"{count} of {count} rows rejected, as the reject policy requires" in row
    assert "0.000e+00" not in row


def test_inspect_shows_what_was_chosen_and_the_training_datas_sha256(capsys, tmp_path):
    import hashlib
    import json

    rng = np.random.default_rng(2)
    X = rng.random((80, 2))
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], [[float(a), float(b), float(a - b)] for a, b in X])
    status, _, err = run_cli(capsys, "train", data, "--target", "y", "--nodes", "12", "--seed", "7",
                             "--slope-scale", "0.5", "--ridge", "1e-3", "--units", "a=m",
                             "-o", tmp_path / "m.ncast")
    assert status == 0, err
    status, text, _ = run_cli(capsys, "inspect", tmp_path / "m.ncast")
    assert status == 0
    sha = hashlib.sha256(data.read_bytes()).hexdigest()  # hashlib: FIPS 180-4 SHA-256
    from nodecast.compiler import load

    chosen = load(tmp_path / "m.ncast").metadata["diagnostics"]["neighbors"]  # k searched (auto)
    assert (f"made with: method data-driven, neighbours {chosen}, slope scale 0.5, ridge 0.001 "
            "(given), seed 7") in text
    assert f"training data: 80 rows, SHA-256 {sha}" in text
    assert "  a [m]: domain" in text and "  b: domain" in text  # no empty unit as []
    assert "[]" not in text and "[0." not in text  # no raw lists
    status, doc, _ = run_cli(capsys, "inspect", tmp_path / "m.ncast", "--json")
    assert json.loads(doc)["metadata"]["training_data"] == {"sha256": sha, "bytes": data.stat().st_size}
    # automatic ridge says so
    status, _, _ = run_cli(capsys, "train", data, "--target", "y", "--nodes", "12",
                           "-o", tmp_path / "auto.ncast")
    status, text, _ = run_cli(capsys, "inspect", tmp_path / "auto.ncast")
    assert "(automatic, " in text and "seed 0" in text


def _with_ids(small, tmp_path) -> Path:
    lines = small["data"].read_text().splitlines()
    rows = [f"stamp,{lines[0]}"] + [f"2026-12-02T10:{i:02d},{line}" for i, line in enumerate(lines[1:6])]
    path = tmp_path / "ids.csv"
    path.write_text("\n".join(rows) + "\n")
    return path


def test_predict_keeps_chosen_columns_before_the_predictions(capsys, small, tmp_path):
    import csv

    from nodecast.compiler import load, reference

    data = _with_ids(small, tmp_path)
    status, out, err = run_cli(capsys, "predict", small["bundle"], data, "--keep", "stamp,b")
    assert status == 0, err
    table = list(csv.reader(out.splitlines()))
    assert table[0] == ["stamp", "b", "y"]
    source = list(csv.reader(data.read_text().splitlines()))
    assert [row[:2] for row in table[1:]] == [[row[0], row[2]] for row in source[1:]]  # verbatim
    X = np.array([[float(row[1]), float(row[2])] for row in source[1:]])
    want = reference.predict(load(small["bundle"]).network, X)[:, 0]
    assert [float(row[2]) for row in table[1:]] == list(want)
    for keep, words in (("nope", "'nope'"), ("y", "already has a column"), ("b,b", "twice")):
        status, out, err = run_cli(capsys, "predict", small["bundle"], data, "--keep", keep)
        assert status == 2 and out == "" and words in err


def test_standalone_predictor_keeps_chosen_columns(capsys, small, tmp_path):
    import csv
    import subprocess
    import sys

    data = _with_ids(small, tmp_path)
    assert run_cli(capsys, "emit", small["bundle"], "--to", "python", "-o", tmp_path / "p.py")[0] == 0
    status, cli_out, _ = run_cli(capsys, "predict", small["bundle"], data, "--keep", "stamp")
    result = subprocess.run([sys.executable, "-I", "-S", str(tmp_path / "p.py"), str(data),
                             "--keep", "stamp"], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
    ours, theirs = (list(csv.reader(text.splitlines())) for text in (result.stdout, cli_out))
    assert ours[0] == ["stamp", "y"] and [r[0] for r in ours] == [r[0] for r in theirs]
    assert np.allclose([float(r[1]) for r in ours[1:]], [float(r[1]) for r in theirs[1:]],
                       rtol=0, atol=1e-12)
    result = subprocess.run([sys.executable, "-I", "-S", str(tmp_path / "p.py"), str(data),
                             "--keep", "missing"], capture_output=True, text=True)
    assert result.returncode == 2 and "'missing'" in result.stderr
    assert len(result.stderr.strip().splitlines()) == 1


def test_a_target_cannot_also_be_a_feature(tmp_path, capsys):
    write_csv(tmp_path / "d.csv", ["a", "y"], np.random.default_rng(2).random((30, 2)))
    result = run_cli(capsys, "train", tmp_path / "d.csv", "--target", "y", "--features", "a,y",
                     "-o", tmp_path / "m.ncast")
    assert result.status == 2 and "both a feature and a target" in result.err


def test_demo_into_an_impossible_folder_is_a_one_line_error(tmp_path, capsys):
    (tmp_path / "file").write_text("x")
    result = run_cli(capsys, "demo", "-o", tmp_path / "file" / "sub")
    assert result.status == 2 and result.err.count("\n") == 1 and "Traceback" not in result.err


def test_a_cell_that_looks_like_a_numpy_number_is_quoted_as_it_is(tmp_path, capsys):
    """Error lines show NumPy scalars as plain numbers, but never rewrite the user's own text."""
    (tmp_path / "d.csv").write_text("a,y\n1,2\nnp.float64(0.26),3\n", encoding="utf-8")
    result = run_cli(capsys, "train", tmp_path / "d.csv", "--target", "y", "-o", tmp_path / "m.ncast")
    assert result.status == 2 and "'np.float64(0.26)'" in result.err

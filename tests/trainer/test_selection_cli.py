"""``nodecast select``: train reproduces the chosen model bit for bit, the budget's exit status,
the report and the plot, and one-line errors for bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.compiler import load
from tests.helpers import cli_status

SEARCH = ["--nodes", "20,60", "--neighbors", "default,15", "--ridge", "0,1e-6,1e-2", "--folds", "3"]



@pytest.fixture(scope="module")
def table(tmp_path_factory):
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, as shipped by sklearn

    X, y = make_friedman1(n_samples=240, n_features=5, noise=0.3, random_state=4)
    path = tmp_path_factory.mktemp("select") / "rig.csv"
    lines = ["speed,load,temp,flow,valve,torque"]
    lines += [",".join(repr(float(v)) for v in row) for row in np.column_stack([X, y])]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture(scope="module")
def selected(table):
    out = table.parent
    code = cli_status("select", table, "--target", "torque", *SEARCH, "--seed", 5,
               "--domain", "speed=0:1", "--units", "torque=N*m",
               "-o", out / "m.ncast", "--report", out / "cv.json", "--plot", out / "cv.png")
    assert code == 0
    return out


def test_train_with_the_chosen_options_reproduces_the_arrays(table, selected):
    chosen = json.loads((selected / "cv.json").read_text())["chosen"]
    settings = chosen["settings"]
    options = ["--nodes", chosen["nodes"], "--ridge", repr(chosen["ridge"]), "--method",
               chosen["method"], "--slope-scale", repr(settings["slope_scale"]),
               "--neighbors", settings["n_neighbors"] or "default"]
    assert cli_status("train", table, "--target", "torque", *options, "--seed", 5,
               "--domain", "speed=0:1", "--units", "torque=N*m", "-o", selected / "t.ncast") == 0
    ours, theirs = load(selected / "m.ncast"), load(selected / "t.ncast")
    for name, array in theirs.network.arrays().items():
        assert np.array_equal(ours.network.arrays()[name], array), name
    assert ours.metadata["settings"] == theirs.metadata["settings"]
    assert ours.metadata["selection"]["chosen"]["n_nodes"] == chosen["nodes"]
    assert ours.network.target_units == ("N*m",) and ours.network.domain_low[0] == 0.0


def test_report_holds_every_point_and_is_reproducible(table, selected):
    report = json.loads((selected / "cv.json").read_text())
    assert len(report["points"]) == 2 * 2 * 3 and report["folds"] == 3
    assert all(len(p["fold_rmse"]) == 3 for p in report["points"])
    best = min(report["points"], key=lambda p: p["score"])
    assert best["rmse_mean"] == report["chosen"]["rmse_mean"]
    assert cli_status("select", table, "--target", "torque", *SEARCH, "--seed", 5, "--domain",
               "speed=0:1", "--units", "torque=N*m", "-o", selected / "again.ncast",
               "--report", selected / "again.json") == 0
    assert (selected / "again.json").read_bytes() == (selected / "cv.json").read_bytes()
    assert (selected / "again.ncast").read_bytes() == (selected / "m.ncast").read_bytes()


def test_plot_is_a_png(selected):
    # the eight-byte PNG signature (PNG specification, RFC 2083)
    assert (selected / "cv.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_budget_reports_the_estimate(table, selected, capsys):
    code = cli_status("select", table, "--target", "torque", *SEARCH, "--precision", "float32",
               "--tolerance", "0.5", "-o", selected / "b.ncast", "--report", selected / "b.json")
    assert code == 0
    report = json.loads((selected / "b.json").read_text())
    assert max(report["final_estimate"]["certified_bound"]) <= 0.5
    assert "certified float32 export error" in capsys.readouterr().err
    assert load(selected / "b.ncast").metadata["selection"]["tolerance"] == 0.5


def test_no_point_meeting_the_tolerance_is_exit_2(table, selected, capsys):
    code = cli_status("select", table, "--target", "torque", *SEARCH, "--precision", "float32",
               "--tolerance", "1e-12", "-o", selected / "none.ncast")
    err = capsys.readouterr().err.strip()
    assert code == 2 and "best estimated export error is" in err and len(err.splitlines()) == 1
    assert not (selected / "none.ncast").exists()


@pytest.mark.parametrize("args, words", [
    (["--tolerance", "0.1"], "--tolerance needs --precision"),
    (["--nodes", "0,10"], "nodes takes positive integers"),
    (["--neighbors", "ten"], "--neighbors takes integers"),
    (["--ridge", "-1"], "ridges takes finite numbers"),
    (["--target", "missing"], "missing"),
    (["--domain", "nope=0:1"], "unknown feature"),
    (["--folds", "500"], "folds must be an integer"),
    (["--jobs", "0"], "--jobs takes a positive integer"),
])
def test_bad_input_is_one_line_and_exit_2(table, tmp_path, capsys, args, words):
    base = {"--target": "torque", "--nodes": "10", "--folds": "3"}
    for key, value in zip(args[::2], args[1::2], strict=True):
        base[key] = value
    flat = [item for pair in base.items() for item in pair]
    code = cli_status("select", table, *flat, "-o", tmp_path / "x.ncast")
    err = capsys.readouterr().err.strip()
    assert code == 2 and words in err and len(err.splitlines()) == 1, err


def test_help_lists_every_option_with_an_example(capsys):
    assert cli_status("select", "--help") == 0
    text = capsys.readouterr().out
    for option in ("--nodes", "--neighbors", "--slope-scales", "--ridge", "--folds", "--precision",
                   "--tolerance", "--grow", "--report", "--plot", "--jobs", "Example:"):
        assert option in text


def test_default_folds_step_down_where_ten_hashed_folds_leave_one_empty(tmp_path, capsys):
    # 30 rows of Friedman #1 (Friedman 1991, sklearn.datasets.make_friedman1): under seed 1 the
    # content hash leaves one of 10 folds empty, not one of 9 (checked here, not assumed)
    from sklearn.datasets import make_friedman1

    from nodecast.trainer.folds import row_folds
    from tests.helpers import run_cli, write_csv

    X, y = make_friedman1(30, n_features=5, noise=0.1, random_state=3)
    X, y = np.round(X, 6), np.round(y, 6)
    assert np.bincount(row_folds(X, 10, 1), minlength=10).min() == 0
    assert np.bincount(row_folds(X, 9, 1), minlength=9).min() > 0
    data = write_csv(tmp_path / "bench.csv", ["a", "b", "c", "d", "e", "y"],
                     [tuple(map(float, row)) + (float(v),) for row, v in zip(X, y, strict=True)])
    common = ("select", data, "--target", "y", "--nodes", "5,10", "--ridge", "1e-6", "--seed", "1")
    run = run_cli(capsys, *common, "-o", tmp_path / "m.ncast", "--report", tmp_path / "r.json")
    assert run.status == 0, run.err
    assert "with 10 hashed folds fold" in run.err and "gets 0 of the 30 rows; used 9 folds" in run.err
    assert json.loads((tmp_path / "r.json").read_text())["folds"] == 9
    given = run_cli(capsys, *common, "--folds", "10", "-o", tmp_path / "g.ncast")
    assert given.status == 2 and len(given.err.strip().splitlines()) == 1
    assert "of 10 gets 0 of the 30 rows" in given.err and not (tmp_path / "g.ncast").exists()

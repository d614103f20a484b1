"""``nodecast compare`` on Franke's 2-D test function (Franke 1979) with uniform noise: the
data-driven generator beats the fixed interval u = 1 at every node count and is ranked above it;
the report's numbers are the table's; bad input is one line and exit 2."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.compiler.csvio import write_table
from tests.helpers import cli_status
from tests.trainer.franke_function import franke, franke_rows


@pytest.fixture(scope="module")
def franke_csv(tmp_path_factory):
    X, y = franke_rows(600, 0)
    path = tmp_path_factory.mktemp("compare") / "franke.csv"
    path.write_text(write_table(["x", "y", "f"], np.column_stack([X, y]).tolist()), encoding="utf-8")
    return path


def test_franke_value_at_a_known_point():
    # Franke's function at the origin, computed by hand from the formula:
    # 0.75 e^(-2) + 0.75 e^(-1/49 - 1/10) + 0.5 e^(-58/4) - 0.2 e^(-65) = 0.7664
    assert franke(np.zeros((1, 2)))[0] == pytest.approx(0.7664, abs=1e-4)


def test_data_driven_beats_the_fixed_interval_at_every_node_count(franke_csv, capsys):
    report = franke_csv.parent / "compare.json"
    assert cli_status("compare", franke_csv, "--target", "f", "--method", "fixed-interval,data-driven",
               "--folds", 10, "--report", report, "--plot", franke_csv.parent / "c.png") == 0
    table = capsys.readouterr().out.splitlines()
    assert table[1].split()[:2] == ["1", "data-driven"]
    assert table[2].split()[:2] == ["2", "fixed-interval"]
    document = json.loads(report.read_text())
    assert document["ranking"] == ["data-driven", "fixed-interval"] and document["folds"] == 10
    curves = {c["name"]: c["curve"] for c in document["contenders"]}
    assert [c["nodes"] for c in curves["data-driven"]] == [50, 100, 250]
    for ours, theirs in zip(curves["data-driven"], curves["fixed-interval"], strict=True):
        assert ours["rmse_mean"][0] < theirs["rmse_mean"][0], (ours, theirs)
    fixed = next(c for c in document["contenders"] if c["name"] == "fixed-interval")
    assert {p["settings"]["interval"] for p in fixed["points"]} == {1.0}
    assert (franke_csv.parent / "c.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature


def test_each_contender_reports_its_best_point_and_its_costs(franke_csv, capsys):
    report = franke_csv.parent / "two.json"
    assert cli_status("compare", franke_csv, "--target", "f", "--method", "slope-angle,interval",
               "--angle-ranges", "0:70,0:85", "--intervals", "1,10", "--nodes", "20,40",
               "--folds", 4, "--report", report) == 0
    document = json.loads(report.read_text())
    for contender in document["contenders"]:
        points = contender["points"]
        assert len(points) == 2 * 2 * 2  # layers x nodes x ridges
        assert contender["chosen"] == min(points, key=lambda p: (p["score"], p["nodes"]))
        assert contender["seconds"]["search"] > 0 and contender["seconds"]["refit"] > 0
    scores = [c["chosen"]["score"] for c in document["contenders"]]
    assert scores == sorted(scores)
    assert all(c["at_grid_end"] == [] for c in document["contenders"])  # two values: no end
    out = capsys.readouterr().out
    assert "angle_range=" in out and "interval=" in out


def test_cli_contenders_are_the_trainers():
    from nodecast.cli.compare import CONTENDERS
    from nodecast.trainer import comparison

    assert CONTENDERS == comparison.CONTENDERS


@pytest.mark.parametrize("args, words", [
    (["--method", "magic"], "--method takes"),
    (["--method", "data-driven", "--intervals", "1,3"], "--intervals sets interval"),
    (["--method", "fixed-interval,data-driven", "--intervals", "3"], "--intervals sets interval"),
    (["--method", "fixed-interval", "--intervals", "3"], "fixed-interval takes no grid options"),
    (["--angle-ranges", "0:95"], "--angle-ranges takes"),
    (["--weight-sums", "5"], "--weight-sums takes"),
    (["--target", "missing"], "missing"),
    (["--folds", "1000"], "folds must be an integer"),
])
def test_bad_input_is_one_line_and_exit_2(franke_csv, capsys, args, words):
    base = {"--target": "f", "--nodes": "10", "--folds": "3"}
    for key, value in zip(args[::2], args[1::2], strict=True):
        base[key] = value
    code = cli_status("compare", franke_csv, *[item for pair in base.items() for item in pair])
    err = capsys.readouterr().err.strip()
    assert code == 2 and words in err and len(err.splitlines()) == 1, err


@pytest.mark.slow
def test_every_generator_ranked_and_data_driven_above_the_fixed_interval(franke_csv, capsys):
    report = franke_csv.parent / "all.json"
    assert cli_status("compare", franke_csv, "--target", "f", "--report", report) == 0
    document = json.loads(report.read_text())
    ranking = document["ranking"]
    assert sorted(ranking) == sorted(["data-driven", "fixed-interval", "interval",
                                      "domain-anchored", "slope-angle", "weight-sum"])
    assert ranking.index("data-driven") < ranking.index("fixed-interval")
    # tuning u by cross-validation can only match or beat u = 1 on the same folds and draws:
    # u = 1 is one of its grid values
    best = {c["name"]: c["chosen"]["score"] for c in document["contenders"]}
    assert best["interval"] <= best["fixed-interval"]


def test_a_choice_at_the_end_of_its_grid_is_marked(franke_csv, capsys):
    # Franke's function has peaks about a tenth of the box wide: the fixed interval's gentlest
    # values cannot follow them: among u = 0.01, 0.02, 0.05 the largest wins (measured), the end.
    report = franke_csv.parent / "edge.json"
    assert cli_status("compare", franke_csv, "--target", "f", "--method", "interval", "--intervals",
               "0.01,0.02,0.05", "--nodes", "30", "--folds", 3, "--report", report) == 0
    (contender,) = json.loads(report.read_text())["contenders"]
    assert contender["chosen"]["settings"]["interval"] == 0.05
    assert contender["at_grid_end"] == ["interval"]
    out = capsys.readouterr().out
    assert "interval=0.05 ridge=" in out and "at the end of its grid" in out

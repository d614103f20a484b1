"""``nodecast train`` on bad input: one clear line on stderr and exit status 2, never a traceback;
and the declared domain: rows outside it are reported, not dropped."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.cli import main
from nodecast.compiler import load
from tests.helpers import write_csv


def _run(capsys, *args):
    """(exit status, stderr) of the CLI in this process."""
    try:
        main([str(arg) for arg in args])
        code = 0
    except SystemExit as exc:
        code = exc.code
    return code, capsys.readouterr().err



@pytest.fixture
def good_rows():
    rng = np.random.default_rng(0)
    X = rng.random((120, 2))
    return [[a, b, a + b * b] for a, b in X]


@pytest.mark.parametrize("case, edit, words", [
    ("nan", lambda rows: rows[:5] + [[0.5, "nan", 1.0]] + rows[5:], ["'b'", "finite", "7"]),
    ("inf", lambda rows: rows[:7] + [["inf", 0.5, 1.0]] + rows[7:], ["'a'", "finite", "9"]),
    ("empty", lambda rows: [], ["at least 2 data rows", "got 0"]),
    ("one row", lambda rows: rows[:1], ["at least 2 data rows", "got 1"]),
    ("text", lambda rows: rows[:3] + [[0.1, "warm", 2.0]] + rows[3:], ["5", "'b'", "'warm'"]),
    ("constant target", lambda rows: [[a, b, 3.5] for a, b, _ in rows], ["single value", "3.5"]),
])
def test_bad_data_is_exit_2_with_one_line(tmp_path, capsys, good_rows, case, edit, words):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], edit(good_rows))
    code, err = _run(capsys, "train", data, "--target", "y", "-o", tmp_path / "m.ncast")
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert all(word in err for word in words), err
    assert not (tmp_path / "m.ncast").exists()


@pytest.mark.parametrize("domain, words", [
    ("a=5:6", ["contains none", "a=5.0:6.0"]),
    ("a=1:0", ["LO <= HI"]),
    ("a=0:inf", ["finite"]),
    ("c=0:1", ["unknown feature", "'c'"]),
])
def test_a_domain_that_cannot_hold_the_data_is_exit_2(tmp_path, capsys, good_rows, domain, words):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    code, err = _run(capsys, "train", data, "--target", "y", "--domain", domain,
                     "-o", tmp_path / "m.ncast")
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1 and all(word in err for word in words), err


def test_a_box_that_holds_no_row_is_exit_2_even_if_each_range_holds_some(tmp_path, capsys,
                                                                          good_rows):
    rows = np.array(good_rows)
    first_a, first_b = np.argmin(rows[:, 0]), np.argmin(rows[:, 1])
    assert first_a != first_b  # so the corner box below holds no row, each range one
    domain = f"a=0:{float(rows[first_a, 0])!r},b=0:{float(rows[first_b, 1])!r}"
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    code, err = _run(capsys, "train", data, "--target", "y", "--domain", domain,
                     "-o", tmp_path / "m.ncast")
    assert code == 2 and "contains none of the 120 rows" in err, err


def test_rows_outside_a_declared_domain_are_reported_not_dropped(tmp_path, capsys, good_rows):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    code, err = _run(capsys, "train", data, "--target", "y", "--domain", "a=0:0.5",
                     "--units", "a=m,y=K", "-o", tmp_path / "m.ncast")
    assert code == 0, err
    bundle = load(tmp_path / "m.ncast")
    beyond = sum(1 for a, _, _ in good_rows if a > 0.5)
    assert bundle.metadata["rows_outside_domain"] == beyond > 0
    assert bundle.metadata["diagnostics"]["rows_outside_domain"] == beyond
    assert bundle.metadata["rows"] == 120 and bundle.metadata["metrics"]["training"]["rows"] == 120
    assert bundle.network.domain_high[0] == 0.5 and bundle.network.feature_units[0] == "m"


def test_more_nodes_than_memory_allows_is_refused_with_the_estimate(tmp_path, capsys, good_rows):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    code, err = _run(capsys, "train", data, "--target", "y", "--nodes", 3_000_000,
                     "-o", tmp_path / "m.ncast")
    assert code == 2 and "GiB" in err and "use fewer nodes" in err, err
    assert len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("value", ["-1", "lots", "nan"])
def test_a_bad_ridge_is_exit_2(tmp_path, capsys, good_rows, value):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    code, err = _run(capsys, "train", data, "--target", "y", "--ridge", value, "-o", tmp_path / "m.ncast")
    assert code == 2 and "--ridge" in err, err


def test_a_classifier_needs_two_classes(tmp_path, capsys, good_rows):
    data = write_csv(tmp_path / "d.csv", ["a", "b", "label"], [[a, b, "cold"] for a, b, _ in good_rows])
    code, err = _run(capsys, "train", data, "--target", "label", "--task", "classification",
                     "-o", tmp_path / "m.ncast")
    assert code == 2 and "single class" in err, err


def test_inspect_shows_saturation_over_the_training_data(tmp_path, capsys, good_rows):
    # Steep fixed-interval nodes (u = 40) are saturated over much of the box; the count over the
    # training rows is recomputed here from the reference's pre-activations.
    from nodecast.compiler import reference
    from nodecast.compiler.activations import get_activation

    data = write_csv(tmp_path / "d.csv", ["a", "b", "y"], good_rows)
    assert _run(capsys, "train", data, "--target", "y", "--method", "interval", "--interval", 40,
                "--nodes", 60, "-o", tmp_path / "m.ncast")[0] == 0
    main(["inspect", str(tmp_path / "m.ncast"), "--json"])
    description = json.loads(capsys.readouterr().out)
    net = load(tmp_path / "m.ncast").network
    Z = reference.hidden_layer(net, np.array(good_rows)[:, :2])
    act = get_activation("logistic")
    peak = act.derivative(np.clip(0.0, Z.min(axis=0), Z.max(axis=0)))
    expected = int(np.sum(peak < 0.01 * act.slope_at_inflection))
    assert description["saturated_nodes_on_training_data"] == expected > 0
    assert description["saturated_nodes_on_domain"] <= expected
    assert description["node_z_range_on_training_data"]["max_high"] == pytest.approx(Z.max())
    main(["inspect", str(tmp_path / "m.ncast")])
    assert f"nodes saturated over the training data: {expected} of 60" in capsys.readouterr().out

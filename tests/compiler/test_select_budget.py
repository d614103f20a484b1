"""Flash and cycle budgets in ``nodecast select``: the chosen model fits them when measured on its
own weights, the report shows the frontier, and an impossible budget exits 2 naming the smallest
achievable figures."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
from click.testing import CliRunner

from nodecast.cli import cli
from nodecast.compiler import load
from nodecast.compiler.backends import render
from nodecast.compiler.instruction_count import ASSUMED_CPI, count_instructions, counting_rows
from nodecast.compiler.toolchain import footprint
from tests.compiler.c_support import need

TOOLS = ("arm-none-eabi-gcc", "qemu-system-arm")


@pytest.fixture(scope="module")
def readings(tmp_path_factory):
    from nodecast.cli.demo_scenario import write_data

    folder = tmp_path_factory.mktemp("readings")
    write_data(folder)
    return folder / "readings.csv"


def _select(readings, tmp_path, *options):
    out = tmp_path / "chosen.ncast"
    args = ["select", str(readings), "--target", "heatsink_temp", "--nodes", "20,60",
            "--ridge", "1e-6", "--folds", "3", "-o", str(out), "--report",
            str(tmp_path / "cv.json"), *options]
    return CliRunner().invoke(cli, args), out


@pytest.mark.slow
def test_a_flash_budget_below_the_full_model_picks_one_that_fits(readings, tmp_path):
    need(*TOOLS)
    result, out = _select(readings, tmp_path, "--max-flash", "1800")
    assert result.exit_code == 0, result.output
    bundle = load(out)
    assert bundle.network.n_nodes == 20  # 60 nodes need more (see the frontier)
    sizes = footprint(render(bundle, "c", precision="float32").files, "model")["cortex-m4f"]
    assert sizes["text"] + sizes["data"] <= 1800
    frontier = json.loads((tmp_path / "cv.json").read_text())["budget"]["frontier"]
    assert [row["nodes"] for row in frontier] == [20, 60]
    assert frontier[1]["flash"] > 1800 and not frontier[1]["meets_budget"]
    assert frontier[0]["cv_rmse"] > frontier[1]["cv_rmse"]  # the budget costs accuracy


@pytest.mark.slow
def test_a_cycle_budget_is_met_by_the_chosen_model_on_its_own_weights(readings, tmp_path):
    need(*TOOLS)
    result, out = _select(readings, tmp_path, "--max-cycles", "6000", "--core", "cortex-m0",
                          "--precision", "q15")
    assert result.exit_code == 0, result.output
    bundle = load(out)
    artifact = render(bundle, "c", precision="q15", out_of_domain="clamp")
    info = {"prefix": "model", "precision": "q15", "n_inputs": 4}
    counts = count_instructions(artifact.files, info, counting_rows(bundle.network)[:16],
                                "cortex-m0")
    assert np.median(counts) * ASSUMED_CPI["cortex-m0"] <= 6000 * 1.02  # weights move counts ~1%


@pytest.mark.slow
def test_an_impossible_budget_exits_2_naming_the_smallest_achievable_size(readings, tmp_path):
    need(*TOOLS)
    out = tmp_path / "chosen.ncast"
    result = subprocess.run([sys.executable, "-m", "nodecast.cli", "select", str(readings),
                             "--target", "heatsink_temp", "--nodes", "20,60", "--folds", "3",
                             "--max-flash", "300", "-o", str(out)],
                            capture_output=True, text=True, check=False)
    assert result.returncode == 2 and "Traceback" not in result.stderr
    assert "the smallest, 20 nodes, needs" in result.stderr and "B of flash" in result.stderr
    assert not out.exists()

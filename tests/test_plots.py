"""Pictures (issue 19): `inspect --plot DIR`, units in titles, the actual k in the CV legend and a
hint when the choice sits at the edge of the grid."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.cli import main
from tests.helpers import run_cli

pytest.importorskip("matplotlib")
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), the file signature



@pytest.fixture(scope="module")
def fan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("plots")
    assert run_plain("demo", "--data-only", "-o", folder) == 0
    rows = (folder / "readings.csv").read_text().splitlines()[:301]
    (folder / "r.csv").write_text("\n".join(rows) + "\n")
    assert run_plain("train", folder / "r.csv", "--target", "heatsink_temp", "--nodes", "40",
                     "--units", "heatsink_temp=degC", "-o", folder / "fan.ncast") == 0
    return folder


def run_plain(*args) -> int:
    try:
        main([str(a) for a in args])
    except SystemExit as exc:
        return exc.code
    return 0


@pytest.mark.slow
def test_inspect_plot_draws_both_pictures_and_keeps_existing_files(capsys, fan, tmp_path):
    out = tmp_path / "pictures"
    status, text, err = run_cli(capsys, "inspect", fan / "fan.ncast", "--plot", out,
                                "--data", fan / "held_out.csv")
    assert status == 0, err
    assert "bundle " in text  # the description is still printed
    for name in ("nodes.png", "predicted_vs_actual.png"):
        assert (out / name).read_bytes().startswith(PNG_SIGNATURE)
    before = (out / "nodes.png").read_bytes()
    status, _, err = run_cli(capsys, "inspect", fan / "fan.ncast", "--plot", out)
    assert status == 2 and "already exists" in err and (out / "nodes.png").read_bytes() == before
    assert run_cli(capsys, "inspect", fan / "fan.ncast", "--plot", out, "--overwrite")[0] == 0
    status, _, err = run_cli(capsys, "inspect", fan / "fan.ncast", "--data", fan / "held_out.csv")
    assert status == 2 and "--plot" in err


def test_predicted_vs_actual_title_names_the_target_and_its_unit(fan, monkeypatch):
    from nodecast.cli import plots
    from nodecast.compiler import load

    titles = []

    def keep_titles(fig, plt, path, overwrite):
        titles.extend(ax.get_title() for ax in fig.axes)
        plt.close(fig)
        return path

    monkeypatch.setattr(plots, "_save", keep_titles)
    bundle = load(fan / "fan.ncast")
    X = np.random.default_rng(0).random((20, 4)) * [35, 3200, 30, 4] + [10, 800, 0, 22]
    plots.plot_predicted_vs_actual(bundle, X, np.full(20, 30.0), fan / "unused.png")
    (title,) = titles
    assert title.startswith("heatsink_temp: RMSE ") and " degC on 20 rows" in title


def test_cv_plot_shows_the_actual_k_units_and_an_edge_hint(capsys, fan, tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from nodecast.cli.selection_plot import search_figure
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer.grid import make_grid
    from nodecast.trainer.method_grid import layer_grid
    from nodecast.trainer.selection import SearchSettings
    from nodecast.trainer.selection_run import run_selection
    from nodecast.trainer.training import TrainingJob

    job = TrainingJob(targets=("heatsink_temp",), units={"heatsink_temp": "degC"})
    grid = make_grid((5, 10), (1e-6,), layer_grid(["data-driven"], {"n_neighbors": [None],
                                                                    "slope_scale": [1.0]}))
    result, _ = run_selection(read_table(fan / "r.csv"), job, grid, SearchSettings(3, 0))
    figure = search_figure(plt, result, "heatsink_temp", "degC", n_features=4)
    ax = figure.axes[0]
    labels = ax.get_legend().get_texts()
    assert "data-driven, k = 10 (default)" in [t.get_text() for t in labels]  # max(10, 2 (4 + 1))
    assert ax.get_ylabel() == "3-fold CV RMSE of heatsink_temp [degC]"
    texts = [t.get_text() for t in ax.texts]
    if result.chosen.nodes == 10:  # the largest M tried: the plot and the command say so
        assert any("M = 10 is the largest tried" in t for t in texts)
    plt.close(figure)
    # through the CLI: the same hint on stderr
    status, _, err = run_cli(capsys, "select", fan / "r.csv", "--target", "heatsink_temp",
                             "--nodes", "5,10", "--folds", "3", "-o", tmp_path / "s.ncast",
                             "--plot", tmp_path / "cv.png")
    assert status == 0, err
    assert (tmp_path / "cv.png").read_bytes().startswith(PNG_SIGNATURE)
    assert ("nodecast: hint: the chosen M = 10 is the largest tried" in err) == \
        ("nodes=10 " in err)
    assert "nodes=10 " in err  # 5 nodes cannot fit this surface as well as 10

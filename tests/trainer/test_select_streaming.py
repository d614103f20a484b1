"""`nodecast select` on a file read chunk by chunk (CSV with --chunk-rows, Parquet): the same grid
points, choice, report and bundle as the search in memory, byte for byte; the folds do not depend
on the chunks; bad input is one line and exit status 2. The data are scikit-learn's
make_friedman1 (Friedman 1991), and fold scores are checked against fold models refitted from
scratch and scored by scikit-learn's root_mean_squared_error."""

from __future__ import annotations

import json

import numpy as np
import pytest

from nodecast.cli import main
from nodecast.compiler.csvio import read_table
from nodecast.trainer.folds import fold_indices, row_folds
from nodecast.trainer.grid import make_grid
from nodecast.trainer.method_grid import layer_grid
from nodecast.trainer.selection import SearchSettings
from nodecast.trainer.selection_run import run_selection
from nodecast.trainer.selection_stream import StreamedSelection, select_streaming
from nodecast.trainer.sources import CsvSource, MemorySource
from nodecast.trainer.training import TrainingJob
from tests.trainer.friedman_log import FEATURES, friedman_log, write_log

CHUNK = 150
SEED = 3


@pytest.fixture(scope="module")
def friedman_csv(tmp_path_factory):
    return write_log(tmp_path_factory.mktemp("select") / "bench.csv", *friedman_log(8 * CHUNK))


def _select(args, out, capsys):
    main(["select", *args, "--features", ",".join(FEATURES), "--folds", "4", "--seed", str(SEED),
          "--nodes", "10,30", "-o", str(out / "model.ncast"), "--report", str(out / "cv.json")])
    capsys.readouterr()
    return (out / "model.ncast").read_bytes(), (out / "cv.json").read_bytes()


def _parquet(csv_path, tmp_path):
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    X, y, grade = friedman_log(8 * CHUNK)
    table = pa.table({**{name: X[:, i] for i, name in enumerate(FEATURES)}, "y": y,
                      "grade": grade.tolist()})
    path = tmp_path / "bench.parquet"
    pq.write_table(table, path, row_group_size=100)
    return path


@pytest.mark.parametrize("task_args", [
    ["--target", "y", "--method", "data-driven,interval", "--neighbors", "default,20",
     "--intervals", "1", "--ridge", "0,1e-6"],
    ["--target", "grade", "--task", "classification", "--score", "log-loss",
     "--neighbors", "default,20", "--slope-scales", "1,2", "--ridge", "1e-6,1e-2"],
])
def test_file_8x_the_chunk_gives_the_in_memory_search_and_bundle(friedman_csv, tmp_path, capsys,
                                                                 task_args):
    whole, chunked, parquet = (tmp_path / name for name in ("whole", "chunked", "parquet"))
    for folder in (whole, chunked, parquet):
        folder.mkdir()
    in_memory = _select([str(friedman_csv), *task_args], whole, capsys)
    streamed = _select([str(friedman_csv), *task_args, "--chunk-rows", str(CHUNK)], chunked, capsys)
    assert streamed == in_memory  # bundle and report, byte for byte
    report = json.loads(in_memory[1])
    assert len(report["points"]) == (12 if "--task" not in task_args else 16)
    from_parquet = _select([str(_parquet(friedman_csv, tmp_path)), *task_args], parquet, capsys)
    assert json.loads(from_parquet[1])["points"] == report["points"]
    assert json.loads(from_parquet[1])["chosen"] == report["chosen"]


def test_streamed_fold_scores_are_those_of_fold_models_fitted_from_scratch(friedman_csv):
    from sklearn.metrics import root_mean_squared_error

    from nodecast.trainer import RandomNodeRegressor

    job = TrainingJob(targets=("y",), features=FEATURES, seed=SEED)
    grid = make_grid([10, 30], [1e-6], layer_grid(["data-driven"], {"n_neighbors": [20]}))
    result, _ = select_streaming(CsvSource(friedman_csv, CHUNK), job, grid,
                                 SearchSettings(folds=4, seed=SEED))
    X, y, _ = friedman_log(8 * CHUNK)
    for fold, (train, valid) in enumerate(fold_indices(X, 4, SEED)):
        model = RandomNodeRegressor(n_nodes=30, n_neighbors=20, slope_scale=1.0, ridge=1e-6,
                                    random_state=SEED).fit(X[train], y[train])
        expected = root_mean_squared_error(y[valid], model.predict(X[valid]))
        point = next(p for p in result.points if p.nodes == 30)
        assert point.fold_rmse[fold][0] == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("chunk", [7, 150, 1000, None])
def test_folds_do_not_depend_on_the_chunks(friedman_csv, chunk):
    job = TrainingJob(targets=("y",), features=FEATURES, seed=SEED)
    source = MemorySource(read_table(friedman_csv)) if chunk is None else CsvSource(friedman_csv, chunk)
    run = StreamedSelection(source, job, folds=4)
    run._count()
    X, _, _ = friedman_log(8 * CHUNK)
    ids = row_folds(X, 4, SEED)
    assert np.array_equal(run.fold_stats.counts, np.bincount(ids, minlength=4))
    for fold in range(4):
        assert np.array_equal(run.fold_stats.x_low[fold], X[ids == fold].min(axis=0))
    assert len(set(ids[X.shape[0] // 2: X.shape[0] // 2 + 30].tolist() + [ids[0]])) == 1
    start = 0  # each chunk's folds, and where its rows fall among each fold's training rows
    for _, _, piece_ids, firsts in run.pieces("folds"):
        assert np.array_equal(piece_ids, ids[start:start + len(piece_ids)])
        assert np.array_equal(firsts, start - np.bincount(ids[:start], minlength=4))
        start += len(piece_ids)
    assert start == len(ids)


def test_precision_budget_works_streamed(friedman_csv, tmp_path, capsys):
    args = [str(friedman_csv), "--target", "y", "--precision", "float32", "--tolerance", "0.001",
            "--ridge", "0,1e-3"]
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    in_memory = _select(args, tmp_path / "a", capsys)
    streamed = _select(args + ["--chunk-rows", "100"], tmp_path / "b", capsys)
    assert streamed == in_memory
    report = json.loads(in_memory[1])
    assert max(report["final_estimate"]["certified_bound"]) <= 0.001
    assert all(p["estimate"] is not None for p in report["points"])
    assert 0 < report["rejected_by_budget"] < len(report["points"])  # the budget decided


def test_the_in_memory_search_and_run_selection_agree_with_the_streamed_api(friedman_csv):
    job = TrainingJob(targets=("y",), features=FEATURES, seed=SEED)
    grid = make_grid([10, 30], [0.0, 1e-6], layer_grid(["data-driven", "slope-angle"], {}))
    settings = SearchSettings(folds=4, seed=SEED, n_jobs=1)
    whole = run_selection(read_table(friedman_csv), job, grid, settings)
    streamed = select_streaming(CsvSource(friedman_csv, 333), job, grid, settings)
    assert whole[0].as_dict() == streamed[0].as_dict()


@pytest.mark.parametrize("extra, words", [
    (["--grow"], "--grow needs the table in memory"),
    (["--categorical", "e"], "--categorical is not available for streamed"),
    (["--folds", "40"], "fewer --folds"),
])
def test_what_streamed_select_refuses_is_one_line_and_exit_2(tmp_path, capsys, extra, words):
    X, y, grade = friedman_log(rows=60)
    X[:, :4] = np.round(X[:, :4])  # few distinct rows: 40 folds leave one empty
    path = write_log(tmp_path / "small.csv", X, y, grade)
    with pytest.raises(SystemExit) as stop:
        main(["select", str(path), "--target", "y", "--features", ",".join(FEATURES),
              "--chunk-rows", "16", "--nodes", "5", "--folds", "3", *extra, "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and words in err[0], err
    assert not (tmp_path / "m.ncast").exists()


def test_a_bad_cell_in_a_late_chunk_names_its_line_and_writes_nothing(tmp_path, capsys):
    X, y, grade = friedman_log(8 * CHUNK)
    path = write_log(tmp_path / "bench.csv", X, y, grade)
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[1000] = "0.5,0.5,0.5,0.5,n/a,1.0,low"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(SystemExit) as stop:
        main(["select", str(path), "--target", "y", "--features", ",".join(FEATURES),
              "--chunk-rows", str(CHUNK), "--nodes", "5", "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and "line 1001" in err[0], err
    assert not (tmp_path / "m.ncast").exists()


def test_progress_reports_every_pass_of_a_streamed_search(friedman_csv):
    from nodecast.trainer.progress import PassProgress

    reports = []
    job = TrainingJob(targets=("y",), features=FEATURES, seed=SEED)
    grid = make_grid([10], [1e-6], layer_grid(["data-driven"], {}))
    select_streaming(CsvSource(friedman_csv, CHUNK), job, grid, SearchSettings(folds=4, seed=SEED),
                     progress=PassProgress(lambda *report: reports.append(report[:3])))
    for what in ("reading", "anchors", "neighbours", "factor", "scores", "figures"):
        assert (what, 1200, 1200) in reports or (what, 1200, None) in reports, what
    assert all(total is None or 0 <= rows <= total for _, rows, total in reports)

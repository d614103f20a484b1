"""Training on a Dask cluster (a LocalCluster of 2 worker processes started here): the same model as
one process (identical hidden layer, output weights within 1e-10 relative), and a worker killed
mid-run gives one clear line and no bundle."""

from __future__ import annotations

import os

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")
da = pytest.importorskip("dask.array")
dd = pytest.importorskip("dask.dataframe")

from nodecast.cli import main  # noqa: E402
from nodecast.compiler.csvio import read_table  # noqa: E402
from nodecast.compiler.errors import NodecastError  # noqa: E402
from nodecast.trainer import frames  # noqa: E402
from nodecast.trainer.cluster_training import train_on_cluster  # noqa: E402
from nodecast.trainer.distributed import ClusterRows  # noqa: E402
from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor  # noqa: E402
from nodecast.trainer.training import TrainingJob, train  # noqa: E402

pytestmark = pytest.mark.slow


def _same_model(single, clustered):
    a, b = single.network, clustered.network
    assert np.array_equal(a.hidden_weights, b.hidden_weights)
    assert np.array_equal(a.hidden_biases, b.hidden_biases)
    assert np.array_equal(a.input_offset, b.input_offset) and np.array_equal(a.domain_low, b.domain_low)
    scale = np.max(np.abs(a.output_weights))
    assert np.max(np.abs(a.output_weights - b.output_weights)) <= 1e-10 * scale
    assert np.allclose(a.output_bias, b.output_bias, rtol=1e-10, atol=1e-10 * scale)


def _bench(path, rows=2400, seed=0):
    """An invented test-bench log (see test_streaming.py)."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 1, (rows, 3))
    rise = np.sin(3 * X[:, 0]) + X[:, 1] * X[:, 2]
    grade = np.where(rise > np.median(rise), "pass", "fail")
    lines = ["flow,load,drift,rise,grade"] + [
        f"{a!r},{b!r},{c!r},{r!r},{g}" for (a, b, c), r, g in zip(X.tolist(), rise.tolist(), grade,
                                                                    strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("task, target", [("regression", "rise"), ("classification", "grade")])
def test_cluster_train_is_the_single_process_model(cluster, tmp_path, monkeypatch, task, target):
    path = _bench(tmp_path / "bench.csv")
    monkeypatch.setattr(frames, "BLOCK_BYTES", 40_000)  # several partitions of a small file
    job = TrainingJob(targets=(target,), features=("flow", "load", "drift"), task=task,
                      params={"n_nodes": 50}, seed=2)
    single = train(read_table(path), job)
    clustered = train_on_cluster(path, job, cluster.scheduler.address)
    _same_model(single, clustered)
    assert clustered.metadata["metrics"]["training"]["rows"] == 2400
    if task == "classification":
        assert clustered.metadata["metrics"] == single.metadata["metrics"]  # counts: exact


def test_neighbour_queries_use_one_thread_on_a_worker_and_every_core_elsewhere(cluster):
    # a worker is one of the processes sharing the cores: its tree queries take one thread
    from nodecast.trainer.neighbours import _query_threads

    assert cluster.submit(_query_threads, pure=False).result() == 1
    assert _query_threads() == -1


def test_progress_of_cluster_passes_and_the_same_model(cluster, tmp_path, monkeypatch):
    from nodecast.trainer.progress import PassProgress

    path = _bench(tmp_path / "bench.csv")
    monkeypatch.setattr(frames, "BLOCK_BYTES", 40_000)
    job = TrainingJob(targets=("rise",), features=("flow", "load", "drift"), params={"n_nodes": 40})
    reports = []
    shown = train_on_cluster(path, job, cluster.scheduler.address,
                             progress=PassProgress(lambda *report: reports.append(report[:3])))
    _same_model(train(read_table(path), job), shown)
    for what in ("reading", "anchors", "neighbours", "factor", "figures"):
        assert (what, 2400, 2400) in reports
    assert all(0 <= rows <= total for _, rows, total in reports)


def test_estimators_take_dask_arrays_and_dataframes(cluster):
    rng = np.random.default_rng(1)
    X = rng.uniform(size=(3000, 4))
    y = np.sin(4 * X[:, 0]) + X[:, 1] ** 2
    single = RandomNodeRegressor(n_nodes=60, random_state=3).fit(X, y)
    on_array = RandomNodeRegressor(n_nodes=60, random_state=3).fit(
        da.from_array(X, chunks=(700, 4)), da.from_array(y, chunks=700))
    import pandas as pd

    frame = dd.from_pandas(pd.DataFrame(X, columns=list("abcd")), npartitions=3)
    labels = (y > 0.9).astype(int)
    single_c = RandomNodeClassifier(n_nodes=60, random_state=3).fit(X, labels)
    on_frame = RandomNodeClassifier(n_nodes=60, random_state=3).fit(
        frame, dd.from_pandas(pd.Series(labels), npartitions=3))
    for a, b in ((single, on_array), (single_c, on_frame)):
        assert np.array_equal(a.hidden_weights_, b.hidden_weights_)
        assert np.max(np.abs(a.coef_ - b.coef_)) <= 1e-10 * np.max(np.abs(a.coef_))
    assert np.array_equal(on_frame.classes_, single_c.classes_)
    assert np.allclose(on_array.predict(X[:50]), single.predict(X[:50]), rtol=0, atol=1e-9)


def _die(X):
    os._exit(3)  # a worker process lost mid-run (out of memory, node failure)


def test_killed_worker_gives_one_line_and_no_bundle(cluster, tmp_path, monkeypatch, capsys):
    from dask import delayed

    path = _bench(tmp_path / "bench.csv", rows=200)
    header = ("flow", "load", "drift", "rise", "grade")
    rows = ClusterRows([delayed(_die)(None)], [200])
    monkeypatch.setattr(frames, "file_partitions", lambda *args: (header, rows))
    out = tmp_path / "model.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "rise", "--features", "flow,load,drift",
              "--cluster", cluster.scheduler.address, "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "worker died" in err[0] and "no bundle" in err[0]


def test_bad_cluster_addresses_are_one_line_errors():
    from nodecast.trainer.distributed import connect

    with pytest.raises(NodecastError, match="positive number of workers"):
        with connect("local:zero"):
            pass


@pytest.mark.parametrize("name", ["missing.csv", "missing.parquet"])
def test_a_missing_file_for_train_on_a_cluster_is_one_line(tmp_path, capsys, name):
    # the file is opened (its header) before any cluster starts or its provenance is recorded
    with pytest.raises(SystemExit) as stop:
        main(["train", str(tmp_path / name), "--target", "y", "--cluster", "local:1",
              "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and "cannot read" in err[0], err
    assert not (tmp_path / "m.ncast").exists()


@pytest.mark.slow
def test_a_bad_cell_on_a_local_cluster_is_one_line_without_the_workers_logs(tmp_path):
    # the workers log a failed task with its traceback; the command prints only its own line,
    # and leaves nothing in the temporary folder
    import subprocess
    import sys

    path = _bench(tmp_path / "bench.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[1500] = "0.5,n/a,0.25,0.1,pass"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    scratch = tmp_path / "tmp"
    scratch.mkdir()
    done = subprocess.run([sys.executable, "-m", "nodecast.cli", "train", str(path), "--target",
                           "rise", "--features", "flow,load,drift", "--cluster", "local:1",
                           "-o", str(tmp_path / "m.ncast")],
                          capture_output=True, text=True, timeout=300,
                          env={**os.environ, "TMPDIR": str(scratch)})
    assert not list(scratch.iterdir())  # Dask's scratch folder went with the run
    assert done.returncode == 2
    lines = done.stderr.splitlines()  # the progress line may show once the run passes 3 s
    assert lines[-1].startswith("nodecast: error: ") and "'n/a'" in lines[-1], done.stderr
    assert all(line.startswith("train: ") for line in lines[:-1]), done.stderr
    assert not (tmp_path / "m.ncast").exists()


@pytest.mark.parametrize("command", ["train", "select"])
def test_chunk_rows_with_a_cluster_is_refused_in_one_line(tmp_path, capsys, command):
    # the partitions of a cluster are 64 MiB blocks or row groups: a --chunk-rows there would be
    # silently ignored, so it is refused before anything starts
    path = _bench(tmp_path / "bench.csv")
    with pytest.raises(SystemExit) as stop:
        main([command, str(path), "--target", "rise", "--features", "flow,load,drift",
              "--chunk-rows", "500", "--cluster", "local:1", "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and "--chunk-rows is for one process" in err[0]

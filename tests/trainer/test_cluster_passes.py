"""The cluster code path run by Dask's synchronous scheduler (no worker processes, so it is fast):
partition passes give the single-process model, and bad cells read by the workers' reader give one
line and exit status 2. The real LocalCluster runs are in test_cluster.py (slow)."""

from __future__ import annotations

import numpy as np
import pytest

dask = pytest.importorskip("dask")
pytest.importorskip("pandas")

from nodecast.cli import main  # noqa: E402
from nodecast.compiler.csvio import read_table  # noqa: E402
from nodecast.trainer import cluster_training, frames  # noqa: E402
from nodecast.trainer.training import TrainingJob, train  # noqa: E402
from tests.helpers import damage_row_group  # noqa: E402

PARTITION_BYTES = 8_000  # about 5 partitions of a small file, for the synchronous fixture (conftest.py)


def _log(path, rows=900, bad=None, copies=1):
    """An invented pump log: speed, head and a power reading (each row ``copies`` times)."""
    rng = np.random.default_rng(5)
    X = np.repeat(rng.uniform(0, 1, (rows // copies, 2)), copies, axis=0)
    power = X[:, 0] ** 3 + 0.5 * X[:, 1]
    lines = ["speed,head,power"] + [f"{a!r},{b!r},{p!r}" for (a, b), p in
                                    zip(X.tolist(), power.tolist(), strict=True)]
    if bad is not None:
        lines[bad] = "0.5,n/a,0.25"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("copies, params", [(1, {"n_nodes": 40}),
                                            (3, {"n_nodes": 30, "n_neighbors": 9})])
def test_partition_passes_give_the_single_process_model(tmp_path, synchronous, copies, params):
    # with copies of every row the ridge's check rows (whole groups of copies) span partitions
    path = _log(tmp_path / "pump.csv", copies=copies)
    job = TrainingJob(targets=("power",), params=params, seed=7)
    single = train(read_table(path), job)
    clustered = cluster_training.train_on_cluster(path, job, "sync")
    a, b = single.network, clustered.network
    assert np.array_equal(a.hidden_weights, b.hidden_weights)
    assert np.array_equal(a.hidden_biases, b.hidden_biases)
    assert np.max(np.abs(a.output_weights - b.output_weights)) <= 1e-10 * np.max(np.abs(a.output_weights))
    held = [bundle.metadata["metrics"]["validation"]["rows"] for bundle in (single, clustered)]
    assert held[0] == held[1]
    assert clustered.metadata["diagnostics"] == single.metadata["diagnostics"]
    checked = [bundle.metadata["ridge"]["check_rows"] for bundle in (single, clustered)]
    assert checked[0] == checked[1] and checked[0] % copies == 0
    assert clustered.metadata["layer_choice"]["neighbors"] == single.metadata["layer_choice"]["neighbors"]


def test_a_bad_cell_read_on_the_cluster_is_one_line(tmp_path, synchronous, capsys):
    path = _log(tmp_path / "pump.csv", bad=700)
    out = tmp_path / "pump.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "power", "--cluster", "sync", "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "n/a" in err[0] and "pump.csv" in err[0]


def test_a_record_longer_than_the_header_is_refused_on_the_cluster_too(tmp_path, synchronous,
                                                                        capsys):
    # one process refuses it; the cluster's reader once dropped the extra field and trained
    path = _log(tmp_path / "pump.csv")
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[700] += ",99"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    for extra in ([], ["--cluster", "sync"]):
        with pytest.raises(SystemExit) as stop:
            main(["train", str(path), "--target", "power", *extra, "-o", str(tmp_path / "p.ncast")])
        err = capsys.readouterr().err.strip().splitlines()
        assert stop.value.code == 2 and len(err) == 1, err
        assert not (tmp_path / "p.ncast").exists()


def test_the_small_file_is_split_into_several_partitions(tmp_path, synchronous):
    job = TrainingJob(targets=("power",))
    _, rows = frames.file_partitions(_log(tmp_path / "pump.csv"), job)
    assert len(rows.parts) >= 4 and sum(rows.counts()) == 900


def test_small_data_take_the_second_fit_for_validation_on_partitions_too(tmp_path, synchronous,
                                                                        monkeypatch):
    # 90 rows: no check set, so the validation figures come from a fit on the rows not held out
    monkeypatch.setattr(frames, "BLOCK_BYTES", 1_000)  # several partitions of a tiny file
    path = _log(tmp_path / "pump.csv", rows=90)
    job = TrainingJob(targets=("power",), params={"n_nodes": 12}, seed=3)
    single = train(read_table(path), job)
    clustered = cluster_training.train_on_cluster(path, job, "sync")
    assert single.metadata["ridge"]["rule"] == clustered.metadata["ridge"]["rule"] == "gcv+float32"
    a, b = (bundle.metadata["metrics"]["validation"] for bundle in (single, clustered))
    assert a["rows"] == b["rows"] > 0
    assert np.allclose(a["rmse"], b["rmse"], rtol=1e-9)
    assert np.array_equal(single.network.hidden_weights, clustered.network.hidden_weights)


@pytest.mark.parametrize("kind", ["float", "bool"])
def test_class_labels_of_a_parquet_number_column_are_those_of_one_process(tmp_path, synchronous,
                                                                          kind):
    # pyarrow writes 2.0 as "2" and True as "true" (the single-process reader); pandas would give
    # "2.0" and "True", so the cluster's bundle would name (and order) its classes differently
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    from nodecast.trainer.sources import ParquetSource
    from nodecast.trainer.streaming import train_streaming

    rng = np.random.default_rng(2)
    X = rng.uniform(0, 1, (300, 2))
    level = X[:, 0] + X[:, 1]
    label = (np.where(level > 1.3, 2.0, np.where(level > 0.7, 1.5, 0.0)) if kind == "float"
             else level > 1.0)
    path = tmp_path / "pump.parquet"
    pq.write_table(pa.table({"speed": X[:, 0], "head": X[:, 1], "grade": label}), path,
                   row_group_size=70)
    job = TrainingJob(targets=("grade",), task="classification", params={"n_nodes": 12}, seed=1)
    single = train_streaming(ParquetSource(path), job)
    clustered = cluster_training.train_on_cluster(path, job, "sync")
    expected = ("0", "1.5", "2") if kind == "float" else ("false", "true")
    assert single.network.class_labels == expected
    assert clustered.network.class_labels == expected
    assert np.array_equal(single.network.hidden_weights, clustered.network.hidden_weights)


def test_an_empty_class_label_read_on_the_cluster_is_refused(tmp_path, synchronous, capsys):
    # one process refuses the empty cell; the workers' pandas reader would make a class "" of it
    path = _log(tmp_path / "pump.csv")
    lines = path.read_text().splitlines()
    lines = [lines[0] + ",grade"] + [f"{line},{'ok' if i % 3 else 'worn'}"
                                     for i, line in enumerate(lines[1:])]
    lines[600] = lines[600].rpartition(",")[0] + ","
    path.write_text("\n".join(lines) + "\n")
    out = tmp_path / "pump.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "grade", "--task", "classification",
              "--features", "speed,head", "--cluster", "sync", "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "'grade'" in err[0] and "empty cell" in err[0], err


def test_a_file_with_carriage_return_line_ends_is_read_once_on_the_cluster(tmp_path, synchronous):
    # the workers split a CSV file into byte blocks at "\n"; a file whose lines end in "\r" alone
    # (old spreadsheet exports; one process reads any line ending) has none, and every block read
    # the whole file: the cluster trained on as many copies of every row as the file had blocks
    path = _log(tmp_path / "pump.csv")
    path.write_bytes(path.read_bytes().replace(b"\n", b"\r"))
    job = TrainingJob(targets=("power",), params={"n_nodes": 20}, seed=2)
    _, rows = frames.file_partitions(path, job)
    assert sum(rows.counts()) == 900
    single = train(read_table(path), job)
    clustered = cluster_training.train_on_cluster(path, job, "sync")
    assert np.array_equal(single.network.hidden_weights, clustered.network.hidden_weights)
    assert clustered.metadata["metrics"]["training"]["rows"] == 900


def test_a_damaged_parquet_row_group_read_on_the_cluster_is_one_line(tmp_path, synchronous, capsys):
    # pyarrow raises OSError on the worker that reads the damaged row group: one line, exit 2
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 1, (4000, 2))
    path = tmp_path / "pump.parquet"
    pq.write_table(pa.table({"speed": X[:, 0], "head": X[:, 1], "power": X[:, 0] ** 3 + X[:, 1]}),
                   path, row_group_size=1000)
    damage_row_group(path, 2)
    out = tmp_path / "pump.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "power", "--cluster", "sync", "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "could not read the data" in err[0], err

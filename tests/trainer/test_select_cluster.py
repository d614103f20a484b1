"""`nodecast select --cluster`: the search's passes on Dask partitions choose the grid point of the
single-process search, with identical hidden layers, output weights within 1e-10 relative and
cross-validated figures within 1e-10 relative; regression and classification. Fast runs use Dask's
synchronous scheduler; the LocalCluster of 2 worker processes (shared with test_cluster.py) is
slow, as is the killed worker. Data: scikit-learn's make_friedman1 (Friedman 1991)."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest

dask = pytest.importorskip("dask")
pytest.importorskip("pandas")

from nodecast.cli import main  # noqa: E402
from nodecast.trainer import frames  # noqa: E402
from tests.trainer.friedman_log import FEATURES, friedman_log, write_log  # noqa: E402

REGRESSION = ["--target", "y", "--method", "data-driven,weight-sum", "--neighbors", "default,20",
              "--weight-sums", "2:10", "--ridge", "0,1e-6"]
CLASSIFICATION = ["--target", "grade", "--task", "classification", "--neighbors", "default,20",
                  "--ridge", "1e-6,1e-2"]


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    return write_log(tmp_path_factory.mktemp("cluster-select") / "bench.csv", *friedman_log(rows=1500))


PARTITION_BYTES = 20_000  # about 7 partitions of the file, for the synchronous fixture (conftest.py)


def _run(bench, out, args, capsys, *extra):
    out.mkdir()
    main(["select", str(bench), *args, "--features", ",".join(FEATURES), "--folds", "5",
          "--seed", "4", "--nodes", "10,40", "-o", str(out / "m.ncast"),
          "--report", str(out / "cv.json"), *extra])
    capsys.readouterr()
    from nodecast.compiler.bundle import load

    return load(out / "m.ncast"), json.loads((out / "cv.json").read_text(encoding="utf-8"))


def _agree(single, clustered):
    (a_bundle, a), (b_bundle, b) = single, clustered
    figures = {"fold_rmse", "rmse_mean", "rmse_std", "max_abs_error", "score", "fold_values",
               "mean", "std", "estimate"}
    assert {k: v for k, v in a["chosen"].items() if k not in figures} == \
        {k: v for k, v in b["chosen"].items() if k not in figures}  # the same grid point
    key = "fold_rmse" if "fold_rmse" in a["points"][0] else "fold_values"
    ours, theirs = (np.array([p[key] for p in doc["points"]], dtype=float) for doc in (a, b))
    assert np.max(np.abs(ours - theirs) / np.abs(ours)) <= 1e-10
    x, y = a_bundle.network, b_bundle.network
    assert np.array_equal(x.hidden_weights, y.hidden_weights)
    assert np.array_equal(x.hidden_biases, y.hidden_biases)
    assert np.max(np.abs(x.output_weights - y.output_weights)) <= 1e-10 * np.max(np.abs(x.output_weights))
    cv = (a_bundle.metadata["metrics"]["cross_validation"], b_bundle.metadata["metrics"]["cross_validation"])
    assert cv[0]["rows"] == cv[1]["rows"] == 1500


@pytest.mark.parametrize("args", [REGRESSION, CLASSIFICATION], ids=["regression", "classification"])
def test_partition_passes_give_the_single_process_search(bench, tmp_path, capsys, synchronous, args):
    single = _run(bench, tmp_path / "single", args, capsys)
    clustered = _run(bench, tmp_path / "cluster", args, capsys, "--cluster", "sync")
    _agree(single, clustered)


def test_precision_budget_and_parquet_on_partitions(bench, tmp_path, capsys, synchronous):
    pa = pytest.importorskip("pyarrow")
    import pyarrow.parquet as pq

    X, y, grade = friedman_log(rows=1500)
    parquet = tmp_path / "bench.parquet"
    pq.write_table(pa.table({**{name: X[:, i] for i, name in enumerate(FEATURES)}, "y": y,
                             "grade": grade.tolist()}), parquet, row_group_size=250)
    budget = [*REGRESSION, "--precision", "float32", "--tolerance", "0.001"]
    single = _run(bench, tmp_path / "single", budget, capsys)
    clustered = _run(parquet, tmp_path / "cluster", budget, capsys, "--cluster", "sync")
    _agree(single, clustered)
    estimates = [np.array([p["estimate"] for p in doc["points"]]) for _, doc in (single, clustered)]
    assert np.allclose(estimates[0], estimates[1], rtol=1e-6, atol=0)
    assert single[1]["rejected_by_budget"] == clustered[1]["rejected_by_budget"] > 0


def test_a_bad_cell_read_on_the_cluster_is_one_line(tmp_path, capsys, synchronous):
    X, y, grade = friedman_log(rows=300)
    path = write_log(tmp_path / "bench.csv", X, y, grade)
    lines = path.read_text(encoding="utf-8").splitlines()
    lines[200] = "0.5,0.5,0.5,0.5,n/a,1.0,low"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(SystemExit) as stop:
        main(["select", str(path), *REGRESSION, "--features", ",".join(FEATURES), "--nodes", "5",
              "--cluster", "sync", "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and "read on the cluster" in err[0], err
    assert not (tmp_path / "m.ncast").exists()


@pytest.mark.parametrize("name, words", [("missing.csv", "cannot read"),
                                         ("missing.parquet", "cannot read")])
def test_a_missing_file_on_the_cluster_is_one_line(tmp_path, capsys, synchronous, name, words):
    with pytest.raises(SystemExit) as stop:
        main(["select", str(tmp_path / name), *REGRESSION, "--cluster", "sync",
              "-o", str(tmp_path / "m.ncast")])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and len(err) == 1 and words in err[0], err


@pytest.mark.slow
@pytest.mark.parametrize("args", [REGRESSION, CLASSIFICATION], ids=["regression", "classification"])
def test_local_cluster_of_two_gives_the_single_process_search(bench, tmp_path, capsys, monkeypatch,
                                                              cluster, args):
    monkeypatch.setattr(frames, "BLOCK_BYTES", 20_000)
    single = _run(bench, tmp_path / "single", args, capsys)
    clustered = _run(bench, tmp_path / "cluster", args, capsys, "--cluster",
                     cluster.scheduler.address)
    _agree(single, clustered)


def _die(part):
    os._exit(3)  # a worker process lost mid-run (out of memory, node failure)


@pytest.mark.slow
def test_killed_worker_gives_one_line_and_no_bundle(bench, tmp_path, capsys, monkeypatch, cluster):
    from dask import delayed

    from nodecast.trainer.distributed import ClusterRows

    header = (*FEATURES, "y", "grade")
    rows = ClusterRows([delayed(_die)(None)], [1500])
    monkeypatch.setattr(frames, "file_partitions", lambda *args: (header, rows))
    out = tmp_path / "model.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["select", str(bench), *REGRESSION, "--features", ",".join(FEATURES),
              "--cluster", cluster.scheduler.address, "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "worker died" in err[0] and "no bundle" in err[0], err

"""Streaming input: a file read chunk by chunk gives the bundle of in-memory training, byte for byte;
and the pieces that make that true (anchors by global row index, k nearest rows merged across
chunks, held-out rows by row hash) checked against outside references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.distance import cdist

from nodecast.cli import main
from nodecast.compiler.bundle import to_bytes
from nodecast.compiler.csvio import read_table
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.anchors import draw_anchors
from nodecast.trainer.neighbours import NearestRows
from nodecast.trainer.row_hash import held_out
from nodecast.trainer.sources import CsvSource, MemorySource, ParquetSource
from nodecast.trainer.streaming import train_streaming
from nodecast.trainer.training import TrainingJob, train
from tests.helpers import damage_row_group

CHUNK = 150


def _table(rows=8 * CHUNK, seed=0):
    """An invented test-bench log: three readings, a temperature rise and a pass/fail grade. One
    reading is coarse (whole numbers) so that the neighbour search meets ties."""
    rng = np.random.default_rng(seed)
    X = np.column_stack([rng.uniform(0, 1, rows), rng.integers(0, 6, rows).astype(float),
                         rng.normal(0, 1, rows)])
    rise = np.sin(3 * X[:, 0]) + 0.2 * X[:, 1] + 0.1 * X[:, 2] ** 2
    grade = np.where(rise > np.median(rise), "pass", "fail")
    return X, rise, grade


def _write_csv(path, X, rise, grade):
    lines = ["flow,stage,drift,rise,grade"]
    lines += [f"{a!r},{b!r},{c!r},{r!r},{g}" for (a, b, c), r, g in
              zip(X.tolist(), rise.tolist(), grade, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def bench_csv(tmp_path):
    return _write_csv(tmp_path / "bench.csv", *_table())


@pytest.mark.parametrize("task, targets, params", [
    ("regression", ("rise",), {"n_nodes": 40}),
    ("regression", ("rise", "drift"), {"n_nodes": 30, "ridge": 0.0}),
    ("classification", ("grade",), {"n_nodes": 40}),
    ("regression", ("rise",), {"n_nodes": 25, "method": "interval"}),
])
def test_file_8x_the_chunk_gives_the_in_memory_bundle(bench_csv, task, targets, params):
    features = tuple(n for n in ("flow", "stage", "drift") if n not in targets)
    job = TrainingJob(targets=targets, features=features, task=task, params=params, seed=4,
                      domain={"flow": (0.0, 1.0)})
    in_memory = train(read_table(bench_csv), job)
    streamed = train_streaming(CsvSource(bench_csv, CHUNK), job)
    assert streamed.metadata["rows"] == 8 * CHUNK
    assert to_bytes(streamed) == to_bytes(in_memory)


@pytest.mark.slow
def test_any_chunk_size_and_parquet_give_the_same_bundle(tmp_path, bench_csv):
    pa, pq = pytest.importorskip("pyarrow"), pytest.importorskip("pyarrow.parquet")
    X, rise, grade = _table()
    parquet = tmp_path / "bench.parquet"
    pq.write_table(pa.table({"flow": X[:, 0], "stage": X[:, 1], "drift": X[:, 2], "rise": rise,
                             "grade": grade}), parquet, row_group_size=333)
    job = TrainingJob(targets=("rise",), features=("flow", "stage", "drift"),
                      params={"n_nodes": 40}, seed=1)
    reference = to_bytes(train(read_table(bench_csv), job))
    for size in (1, 7, 1000, 5000):
        assert to_bytes(train_streaming(CsvSource(bench_csv, size), job)) == reference, size
    assert to_bytes(train_streaming(ParquetSource(parquet, 256), job)) == reference


def test_cli_chunked_and_whole_reads_write_the_same_file(tmp_path, bench_csv, capsys):
    outputs = []
    for extra in ([], ["--chunk-rows", "100"]):
        out = tmp_path / f"model{len(extra)}.ncast"
        main(["train", str(bench_csv), "--target", "rise", "--features", "flow,stage,drift",
              "--nodes", "30", "-o", str(out)] + extra)
        outputs.append(out.read_bytes())
        assert "warning" not in capsys.readouterr().err  # the spilled copy is removed, not leaked
    assert outputs[0] == outputs[1]


@pytest.mark.slow
def test_copies_of_rows_stay_on_one_side_of_the_ridge_check_in_any_chunking(tmp_path):
    # every row twice: the default ridge's held-out check holds out whole pairs (a hash of the
    # row's values), the same pairs whatever the chunks
    X, rise, grade = (np.repeat(part, 2, axis=0) for part in _table(600, seed=2))
    path = _write_csv(tmp_path / "twice.csv", X, rise, grade)
    job = TrainingJob(targets=("rise",), features=("flow", "stage", "drift"),
                      params={"n_nodes": 30}, seed=3)
    reference = train(read_table(path), job)
    record = reference.metadata["ridge"]
    assert record["rule"] == "gcv+heldout+float32" and record["check_rows"] % 2 == 0
    assert 0.1 * 1200 <= record["check_rows"] <= 0.3 * 1200
    for size in (1, 150, 777):
        assert to_bytes(train_streaming(CsvSource(path, size), job)) == to_bytes(reference), size


@pytest.mark.slow
def test_above_20000_rows_the_strided_trend_rows_are_gathered_from_the_chunks(tmp_path):
    # the global trend of the local fits and the heavy-tail note read every s-th row (s = 3
    # here); the streamed fit gathers those rows from chunks that do not align with s
    X, rise, grade = _table(41_000, seed=3)
    X[:, 2] = np.exp(3 * X[:, 2])  # heavy-tailed: a few rows set the range
    path = _write_csv(tmp_path / "long.csv", X, rise, grade)
    job = TrainingJob(targets=("rise",), features=("flow", "stage", "drift"), seed=5,
                      params={"n_nodes": 20, "n_neighbors": 12, "slope_scale": 1.0})
    table = read_table(path)
    reference = train(table, job)
    assert reference.metadata["heavy_tailed_features"] == ["drift"]
    streamed = train_streaming(MemorySource(table, 4_999), job)
    assert to_bytes(streamed) == to_bytes(reference)


@pytest.mark.parametrize("rows, fraction", [(90, 0.2), (600, 0.0), (600, 0.5)])
def test_validation_figures_from_the_check_rows_or_a_small_second_fit(tmp_path, rows, fraction):
    # 90 rows: too few for a check set (18 < 20 rows), so the figures come from a second fit on
    # the rows not held out, streamed as well; fraction 0: no check and no figures; 0.5: the check
    # (and the figures) take about half of the rows
    path = _write_csv(tmp_path / "bench.csv", *_table(rows, seed=4))
    job = TrainingJob(targets=("rise",), features=("flow", "stage", "drift"), seed=2,
                      params={"n_nodes": 12}, validation_fraction=fraction)
    reference = train(read_table(path), job)
    metrics, ridge = reference.metadata["metrics"], reference.metadata["ridge"]
    if fraction == 0.0:
        assert "validation" not in metrics and ridge["rule"] == "gcv+float32"
    elif rows == 90:
        assert ridge["rule"] == "gcv+float32" and 5 <= metrics["validation"]["rows"] <= 35
    else:
        assert metrics["validation"]["rows"] == ridge["check_rows"]
        assert abs(ridge["check_rows"] - fraction * rows) <= 4 * np.sqrt(rows * 0.25)  # binomial
    for size in (7, 64):
        assert to_bytes(train_streaming(CsvSource(path, size), job)) == to_bytes(reference), size


def test_categorical_inputs_are_refused_in_one_line_when_streamed(bench_csv):
    job = TrainingJob(targets=("rise",), features=("flow", "stage", "drift"),
                      categorical=("stage",), params={"n_nodes": 10})
    with pytest.raises(NodecastError, match="--categorical is not available for streamed"):
        train_streaming(CsvSource(bench_csv, CHUNK), job)


def test_bad_cell_in_a_late_chunk_names_its_line_and_writes_nothing(tmp_path, capsys):
    X, rise, grade = _table(600)
    path = _write_csv(tmp_path / "bench.csv", X, rise, grade)
    lines = path.read_text().splitlines()
    lines[500] = lines[500].replace(lines[500].split(",")[1], "", 1)  # an empty cell, file line 501
    path.write_text("\n".join(lines) + "\n")
    out = tmp_path / "model.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "rise", "--features", "flow,stage,drift",
              "--chunk-rows", "64", "-o", str(out)])
    err = capsys.readouterr().err.strip()
    assert stop.value.code == 2 and not out.exists()
    assert len(err.splitlines()) == 1 and "line 501" in err and "'stage'" in err and "empty" in err


def test_anchor_draw_is_a_uniform_sample_without_replacement_and_prefix_stable():
    rng = np.random.RandomState
    first = draw_anchors(10**9, 50, rng(5))
    assert np.array_equal(draw_anchors(10**9, 20, rng(5)), first[:20])
    assert np.unique(first).size == 50 and first.min() >= 0 and first.max() < 10**9
    rounds = draw_anchors(7, 23, rng(2))  # more nodes than rows: full shuffles, then a partial one
    assert all(sorted(rounds[i:i + 7]) == list(range(7)) for i in (0, 7, 14))
    # Uniformity (a fact of the trade: every index equally likely in every position of a uniform
    # random permutation): Pearson's chi-square test of the first and third picks over 4,000 draws.
    picks = np.array([draw_anchors(10, 3, rng(seed)) for seed in range(4000)])
    for column in (0, 2):
        counts = np.bincount(picks[:, column], minlength=10)
        assert stats.chisquare(counts).pvalue > 1e-3


def test_neighbours_merged_over_chunks_match_brute_force_with_ties():
    rng = np.random.default_rng(3)
    V = rng.integers(0, 4, size=(900, 2)).astype(float)  # a coarse grid: many equal distances
    T = rng.normal(size=(900, 2))
    anchors, columns, k = V[[0, 17, 450, 899]], np.array([0, 1, 1, 0]), 12
    found = NearestRows(anchors, k, columns)
    for start in range(0, 900, 64):
        part = NearestRows(anchors, k, columns)
        part.update(V[start:start + 64], T[start:start + 64], start)
        found.merge(part)
    # reference: scipy's brute-force distances, ties broken by row index (np.lexsort)
    distances = cdist(anchors, V)
    expected = np.array([np.lexsort((np.arange(900), d))[:k] for d in distances])
    assert np.array_equal(found.indices, expected)
    assert np.array_equal(found.targets, T[expected, columns[:, None]])
    assert np.array_equal(found.rows, V[expected])


def test_held_out_rows_do_not_depend_on_chunks_and_match_the_fraction():
    whole = held_out(0, 100_000, 0.2, seed=9)
    pieces = np.concatenate([held_out(s, 3_333, 0.2, 9)[: min(3_333, 100_000 - s)]
                             for s in range(0, 100_000, 3_333)])
    assert np.array_equal(whole, pieces)
    # binomial(100000, 0.2): standard deviation 126.5; 5 standard deviations
    assert abs(int(whole.sum()) - 20_000) < 5 * 126.5
    assert not np.array_equal(whole, held_out(0, 100_000, 0.2, seed=10))


def test_a_spilled_csv_is_parsed_once_and_gives_the_same_bundle(bench_csv):
    from nodecast.trainer.sources import SpilledSource

    class Counting(CsvSource):
        passes = 0

        def chunks(self, names, label=None):
            Counting.passes += 1
            yield from super().chunks(names, label)

    job = TrainingJob(targets=("grade",), features=("flow", "stage", "drift"),
                      task="classification", params={"n_nodes": 30}, seed=3)
    source = SpilledSource(Counting(bench_csv, 100))
    spilled = train_streaming(source, job)
    folder = source.folder.name
    assert Counting.passes == 1
    assert to_bytes(spilled) == to_bytes(train(read_table(bench_csv), job))
    source.close()
    import os

    assert not os.path.exists(folder)


def test_a_bad_cell_is_reported_in_the_words_of_the_whole_file_read(tmp_path, capsys):
    """A refused cell is bad input, not a failed fit: streamed or whole, the same one line (no
    'cannot train:' in front of the reader's message)."""
    X, rise, grade = _table(300)
    path = _write_csv(tmp_path / "bench.csv", X, rise, grade)
    lines = path.read_text().splitlines()
    lines[250] = lines[250].replace(lines[250].split(",")[2], "nan", 1)
    path.write_text("\n".join(lines) + "\n")
    errors = []
    for extra in ([], ["--chunk-rows", "64"]):
        with pytest.raises(SystemExit) as stop:
            main(["train", str(path), "--target", "rise", "--features", "flow,stage,drift",
                  "--nodes", "10", "-o", str(tmp_path / "model.ncast")] + extra)
        assert stop.value.code == 2
        errors.append(capsys.readouterr().err.strip())
    assert "line 251" in errors[0] and "'drift'" in errors[0]
    assert errors[1] == errors[0]


def test_a_full_temporary_folder_is_one_line_and_leaves_nothing(tmp_path, bench_csv, capsys,
                                                                 monkeypatch):
    # a streamed CSV keeps its parsed columns in $TMPDIR (8 bytes per number): a disk that fills
    # up on the way must end the run with one line, no traceback, no bundle and no leftovers
    import errno

    from nodecast.trainer import sources

    real, calls = np.save, []

    def filling_save(*args, **kwargs):
        calls.append(args[0])
        if len(calls) > 3:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(*args, **kwargs)

    monkeypatch.setattr(sources.np, "save", filling_save)
    monkeypatch.setenv("TMPDIR", str(tmp_path / "spill"))
    (tmp_path / "spill").mkdir()
    monkeypatch.setattr(sources.tempfile, "tempdir", None)  # read TMPDIR again
    out = tmp_path / "model.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(bench_csv), "--target", "rise", "--features", "flow,stage,drift",
              "--chunk-rows", "100", "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "No space left" in err[0] and "TMPDIR" in err[0], err
    assert list((tmp_path / "spill").iterdir()) == []


def test_a_damaged_parquet_row_group_is_one_line_and_writes_nothing(tmp_path, capsys):
    # the footer reads fine, a later row group's data page does not: pyarrow raises while the
    # chunks are read, which must end the run with one line (exit 2), not a traceback
    pa = pytest.importorskip("pyarrow")
    pq = pytest.importorskip("pyarrow.parquet")
    X, rise, _ = _table(4000)
    path = tmp_path / "bench.parquet"
    pq.write_table(pa.table({"flow": X[:, 0], "stage": X[:, 1], "drift": X[:, 2], "rise": rise}),
                   path, row_group_size=1000, compression="snappy")
    damage_row_group(path, 2)
    out = tmp_path / "model.ncast"
    with pytest.raises(SystemExit) as stop:
        main(["train", str(path), "--target", "rise", "--nodes", "10", "--chunk-rows", "500",
              "-o", str(out)])
    err = capsys.readouterr().err.strip().splitlines()
    assert stop.value.code == 2 and not out.exists()
    assert len(err) == 1 and "cannot read" in err[0] and "after data row 2000" in err[0], err


@pytest.mark.parametrize("cut", [0, 1])
def test_a_file_that_stops_being_utf8_is_named_at_its_byte(tmp_path, cut):
    # the text reader decodes ahead of its rows, so the byte is found again in binary; a
    # two-byte character split by the 1 MiB read blocks (cut = 1) must not shift it (UTF-8,
    # RFC 3629: 0xC3 0xA9 is one character, 0xFF never occurs)
    from nodecast.trainer.sources import _first_bad_byte

    head = b"a" * (2**20 - 1 - cut)
    data = head + "\u00e9".encode() + b"x" * 10 + b"\xff" + b"tail"
    path = tmp_path / "bad.csv"
    path.write_bytes(data)
    assert _first_bad_byte(path) == f"invalid start byte at byte {len(head) + 2 + 10}"
    path.write_bytes(b"h\n" + "\u00e9".encode()[:1])  # a character cut by the end of the file
    assert _first_bad_byte(path) == "unexpected end of data at byte 2"

"""Helpers shared by the tests (and the benchmarks): run the command line in this process, write
small CSV files, make the invented data sets several files use."""

from __future__ import annotations

import numbers
from pathlib import Path
from typing import NamedTuple

import numpy as np

from nodecast.cli import main


class CliRun(NamedTuple):
    status: int
    out: str
    err: str


def run_cli(capsys, *args) -> CliRun:
    """``nodecast ARGS`` run in this process: exit status, stdout and stderr (read from ``capsys``)."""
    status = cli_status(*args)
    captured = capsys.readouterr()
    return CliRun(status, captured.out, captured.err)


def cli_status(*args) -> int:
    """The exit status of ``nodecast ARGS`` run in this process (its output is left to the caller)."""
    try:
        main([str(arg) for arg in args])
    except SystemExit as stop:
        return 0 if stop.code is None else stop.code
    return 0


def write_csv(path: Path, header, rows) -> Path:
    """A CSV file of ``header`` and ``rows``: text cells as they are, integers as integers, other
    numbers as the shortest decimal that reads back to the same float64 (``repr``)."""
    text = ",".join(header) + "\n" + "".join(",".join(map(_cell, row)) + "\n" for row in rows)
    Path(path).write_text(text, encoding="utf-8")
    return Path(path)


def _cell(value) -> str:
    if isinstance(value, str):
        return value
    if isinstance(value, numbers.Integral):
        return str(int(value))
    return repr(float(value))


def workshop_log(rows: int = 600, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Invented workshop log: two count columns (Poisson, many ties), a one-hot product family of
    four kinds, a yes/no column, a gauge read to two levels, every row present three times, and
    a noisy target (noise 0.5)."""
    rng = np.random.default_rng(seed)
    base = rows // 3
    counts = rng.poisson([1.0, 3.0], size=(base, 2)).astype(float)
    family = np.eye(4)[rng.integers(4, size=base)]
    flag = (rng.random((base, 1)) < 0.3).astype(float)
    gauge = np.round(rng.random((base, 1)), 0)
    X = np.repeat(np.column_stack([counts, family, flag, gauge]), 3, axis=0)
    y = X[:, 0] - 0.5 * X[:, 1] + 2 * X[:, 3] + X[:, 6] + rng.normal(0, 0.5, size=X.shape[0])
    return X, y


def damage_row_group(path, group: int) -> None:
    """Scramble bytes of the first column's data page of a Parquet file's row group ``group``: the
    footer still reads, that row group's data does not."""
    import pyarrow.parquet as pq

    data = bytearray(path.read_bytes())
    start = pq.ParquetFile(path).metadata.row_group(group).column(0).data_page_offset
    data[start + 40:start + 2000] = bytes((7 * b + 13) % 256 for b in data[start + 40:start + 2000])
    path.write_bytes(bytes(data))

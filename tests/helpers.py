"""Helpers shared by the tests: run the command line in this process, write small CSV files."""

from __future__ import annotations

import numbers
from pathlib import Path
from typing import NamedTuple

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

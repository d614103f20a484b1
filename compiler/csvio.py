"""CSV in and out, by the product's conventions.

Input: comma-separated, a header row, UTF-8 with or without a BOM, any line ending; columns are found
by header name in any order and extra columns are ignored. Blank lines are skipped. A missing column,
a duplicated header, a row of the wrong length, or an empty or non-numeric cell in a numeric column is
a :class:`NodecastError` naming the row (counting the header as row 1) and the column. Numbers are
written with ``repr`` (the shortest text that round-trips), NaN as ``nan``.
"""

from __future__ import annotations

import csv
import io
import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError


@dataclass(frozen=True)
class Table:
    header: tuple[str, ...]
    rows: list[list[str]]
    source: str

    def column_index(self, name: str) -> int:
        try:
            return self.header.index(name)
        except ValueError:
            raise NodecastError(f"{self.source}: no column {name!r} (columns: "
                                f"{', '.join(map(repr, self.header))})") from None

    def numbers(self, names) -> np.ndarray:
        """The named columns as float64, shape (n_rows, len(names))."""
        missing = [name for name in names if name not in self.header]
        if missing:
            raise NodecastError(f"{self.source}: missing column(s) {', '.join(map(repr, missing))}")
        indices = [self.column_index(name) for name in names]
        out = np.empty((len(self.rows), len(indices)))
        for r, row in enumerate(self.rows):
            for c, index in enumerate(indices):
                out[r, c] = _number(row[index], self.source, r + 2, names[c])
        return out

    def texts(self, name: str) -> list[str]:
        index = self.column_index(name)
        values = [row[index] for row in self.rows]
        for r, value in enumerate(values):
            if value.strip() == "":
                raise NodecastError(f"{self.source}: row {r + 2}, column {name!r}: empty cell")
        return values


def _number(text: str, source: str, row: int, column: str) -> float:
    try:
        value = float(text)
    except ValueError:
        shown = text if len(text) <= 40 else text[:37] + "..."
        raise NodecastError(f"{source}: row {row}, column {column!r}: {shown!r} is not a number") from None
    return value


def read_table(path: str | os.PathLike | None, text: str | None = None) -> Table:
    """Read a CSV file (or ``text``) into a :class:`Table`."""
    source = str(path) if path is not None else "<stdin>"
    if text is None:
        try:
            text = Path(path).read_bytes().decode("utf-8-sig")
        except OSError as exc:
            raise NodecastError(f"cannot read {source}: {exc.strerror or exc}") from None
        except UnicodeDecodeError as exc:
            raise NodecastError(f"{source}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    text = text.lstrip("\ufeff")
    try:
        records = [(n, row) for n, row in enumerate(csv.reader(io.StringIO(text, newline="")), 1)
                   if any(cell.strip() for cell in row)]
    except csv.Error as exc:
        raise NodecastError(f"{source}: malformed CSV: {exc}") from None
    if not records:
        raise NodecastError(f"{source}: empty file; expected a header row")
    (_, header), body = records[0], records[1:]
    header = tuple(name.strip() for name in header)
    duplicates = sorted({name for name in header if header.count(name) > 1})
    if duplicates:
        raise NodecastError(f"{source}: duplicated column name(s) {', '.join(map(repr, duplicates))}")
    for line, row in body:
        if len(row) != len(header):
            raise NodecastError(f"{source}: row {line} has {len(row)} fields, the header has {len(header)}")
    return Table(header, [row for _, row in body], source)


def format_number(value: float) -> str:
    return "nan" if math.isnan(value) else repr(float(value))


def write_table(header, rows) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([cell if isinstance(cell, str) else format_number(cell) for cell in row])
    return buffer.getvalue()

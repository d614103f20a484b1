"""CSV in and out, by the product's conventions (docs/reliability.md has the full rules).

Input: comma-separated, a header row, UTF-8 with or without a BOM, any line ending, RFC 4180
quoting (a malformed quote is an error). Columns are found by header name in any order; extra
columns are ignored. A record with nothing in any cell (an empty line, or only commas and spaces)
is skipped. Errors name the line of the file where the record starts and the column: a missing
column, an unnamed or duplicated header, a record of the wrong length, an empty cell, a cell that
is not a plain decimal number, a number beyond float64's range. ``nan`` and ``inf`` are refused
unless the caller allows them (``predict`` does). Yes/no cells read as numbers: ``yes`` and ``true``
are 1, ``no`` and ``false`` are 0, in any letter case (spreadsheets write ``TRUE``); other text
is refused. Output numbers are written with ``repr`` (the
shortest text that round-trips), NaN as ``nan``.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError

# A plain decimal number in ASCII: no hex, no digit separators, no other scripts' digits.
_DECIMAL = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?", re.ASCII)
_NON_FINITE = re.compile(r"[+-]?(?:nan|inf|infinity)", re.ASCII | re.IGNORECASE)
_SHOWN_CHARACTERS = 40
_YES_NO = {"yes": 1.0, "true": 1.0, "no": 0.0, "false": 0.0}  # keys in lower case


def _shown(text: str) -> str:
    return repr(text if len(text) <= _SHOWN_CHARACTERS else text[: _SHOWN_CHARACTERS - 3] + "...")


@dataclass(frozen=True)
class Table:
    """The header and the data records of a CSV file.

    ``lines[i]`` is the line of the file where ``rows[i]`` starts; the header is on
    ``header_line``.
    """

    header: tuple[str, ...]
    rows: list[list[str]]
    source: str
    lines: tuple[int, ...] = ()
    header_line: int = 1

    def _line(self, index: int) -> int:
        return self.lines[index] if self.lines else index + self.header_line + 1

    def column_index(self, name: str) -> int:
        try:
            return self.header.index(name)
        except ValueError:
            raise NodecastError(f"{self.source}: no column {name!r} (columns: "
                                f"{', '.join(map(repr, self.header))})") from None

    def numbers(self, names, allow_nonfinite: bool = False) -> np.ndarray:
        """The named columns as float64, shape (n_rows, len(names)).

        ``allow_nonfinite`` accepts cells spelled ``nan``, ``inf`` or ``-inf``; a finite-looking
        number that overflows float64 (``1e400``) is refused either way.
        """
        missing = [name for name in names if name not in self.header]
        if missing:
            raise NodecastError(f"{self.source}: missing column(s) {', '.join(map(repr, missing))}")
        indices = [self.column_index(name) for name in names]
        out = np.empty((len(self.rows), len(indices)))
        for r, row in enumerate(self.rows):
            for c, index in enumerate(indices):
                out[r, c], problem = _number(row[index], allow_nonfinite)
                if problem:
                    raise NodecastError(f"{self.source}: line {self._line(r)}, column "
                                        f"{names[c]!r}: {problem}")
        return out

    def texts(self, name: str) -> list[str]:
        """The named column as text with surrounding spaces removed; empty cells are refused."""
        index = self.column_index(name)
        values = [row[index].strip() for row in self.rows]
        for r, value in enumerate(values):
            if value == "":
                raise NodecastError(f"{self.source}: line {self._line(r)}, column {name!r}: "
                                    "empty cell (missing value)")
        return values


def _number(text: str, allow_nonfinite: bool) -> tuple[float, str | None]:
    """The value of a cell and None, or NaN and the reason the cell is refused."""
    cell = text.strip()
    if cell == "":
        return math.nan, "empty cell (missing value)"
    if _DECIMAL.fullmatch(cell):
        value = float(cell)
        if math.isinf(value):
            return value, f"{_shown(cell)} is beyond the range of float64 (about 1.8e308)"
        return value, None
    if cell.isascii() and cell.lower() in _YES_NO:
        return _YES_NO[cell.lower()], None
    if _NON_FINITE.fullmatch(cell):
        if allow_nonfinite:
            return float(cell), None
        return math.nan, f"{_shown(cell)} is not a finite number; this command needs finite values"
    return math.nan, f"{_shown(text)} is not a number"


def _decode(path, text: str | None) -> tuple[str, str]:
    source = str(path) if path is not None else "<stdin>"
    if text is None:
        try:
            text = Path(path).read_bytes().decode("utf-8-sig")
        except OSError as exc:
            raise NodecastError(f"cannot read {source}: {exc.strerror or exc}") from None
        except UnicodeDecodeError as exc:
            raise NodecastError(f"{source}: not UTF-8 text ({exc.reason} at byte "
                                f"{exc.start})") from None
    return source, text.removeprefix("\ufeff")


def _records(source: str, text: str) -> list[tuple[int, list[str]]]:
    """(line where the record starts, cells) for every record that holds something."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    records, consumed = [], 0
    try:
        for row in reader:
            if any(cell.strip() for cell in row):
                records.append((consumed + 1, row))
            consumed = reader.line_num
    except csv.Error as exc:
        raise NodecastError(f"{source}: line {reader.line_num}: malformed CSV ({exc})") from None
    return records


def _check_header(source: str, header: tuple[str, ...]) -> None:
    for position, name in enumerate(header, 1):
        if name == "":
            raise NodecastError(f"{source}: header column {position} has no name")
    repeated = [name for name, count in Counter(header).items() if count > 1]
    if repeated:
        positions = [str(i) for i, name in enumerate(header, 1) if name == repeated[0]]
        raise NodecastError(f"{source}: duplicated column name {repeated[0]!r} "
                            f"(columns {', '.join(positions)})")


def read_table(path: str | os.PathLike | None, text: str | None = None) -> Table:
    """Read a CSV file (or ``text``) into a :class:`Table`."""
    source, text = _decode(path, text)
    records = _records(source, text)
    if not records:
        raise NodecastError(f"{source}: empty file; expected a header row")
    (header_line, header), body = records[0], records[1:]
    header = tuple(name.strip() for name in header)
    _check_header(source, header)
    for line, row in body:
        if len(row) != len(header):
            raise NodecastError(f"{source}: line {line} has {len(row)} fields, the header has "
                                f"{len(header)}")
    return Table(header, [row for _, row in body], source, tuple(line for line, _ in body),
                 header_line)


def format_number(value: float) -> str:
    return "nan" if math.isnan(value) else repr(float(value))


def write_table(header, rows) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for row in rows:
        writer.writerow([cell if isinstance(cell, str) else format_number(cell) for cell in row])
    return buffer.getvalue()

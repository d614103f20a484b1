"""Training tables read chunk by chunk: CSV (by the product's CSV rules, docs/reliability.md) and
Parquet (through pyarrow), or a table already in memory.

A source yields :class:`Chunk` objects in file order; every pass of a streamed fit reads the source
again, so memory holds one chunk at a time whatever the number of rows. Errors name the file, the
line (CSV) or data row (Parquet) and the column, as for tables read whole. A large CSV file is parsed
once: its parsed columns are kept in a temporary folder for the later passes (:class:`SpilledSource`).
"""

from __future__ import annotations

import contextlib
import csv
import os
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nodecast.compiler.csvio import Table, _check_header, read_table
from nodecast.compiler.errors import NodecastError

CHUNK_ROWS = 50_000  # rows per chunk: a few tens of MB of parsed CSV text at most
IN_MEMORY_BYTES = 32 * 2**20  # CSV files up to this size are read whole (one parse, same model)
PARQUET_SUFFIXES = (".parquet", ".pq")


@dataclass(frozen=True, eq=False)
class Chunk:
    """Rows first .. first + len - 1 of the table: numbers (r, f) float64 of the requested numeric
    columns, and labels (r,) object (text) of the requested label column or None."""

    first: int
    numbers: np.ndarray
    labels: np.ndarray | None = None


class TableSource:
    """What a streamed fit reads: ``header``, ``source`` (a name for messages) and ``chunks``."""

    header: tuple[str, ...] = ()
    source: str = ""

    def chunks(self, names, label: str | None = None) -> Iterator[Chunk]:
        raise NotImplementedError

    def close(self) -> None:
        """Release what the source holds (a spilled copy on disk); nothing by default."""

    def check_columns(self, names) -> None:
        missing = [name for name in names if name not in self.header]
        if missing:
            raise NodecastError(f"{self.source}: missing column(s) {', '.join(map(repr, missing))}")


class MemorySource(TableSource):
    """A parsed :class:`Table` served in chunks (the columns are converted once)."""

    def __init__(self, table: Table, chunk_rows: int = CHUNK_ROWS) -> None:
        self.table, self.chunk_rows = table, chunk_rows
        self.header, self.source = table.header, table.source

    def chunks(self, names, label=None):
        numbers = self.table.numbers(names)
        labels = np.asarray(self.table.texts(label), dtype=object) if label else None
        for start in range(0, numbers.shape[0], self.chunk_rows):
            stop = start + self.chunk_rows
            yield Chunk(start, numbers[start:stop], None if labels is None else labels[start:stop])


class CsvSource(TableSource):
    """A CSV file parsed ``chunk_rows`` records at a time."""

    def __init__(self, path, chunk_rows: int = CHUNK_ROWS) -> None:
        self.path, self.chunk_rows, self.source = Path(path), chunk_rows, str(path)
        records = self._records()
        try:
            line, header = next(records)
        except StopIteration:
            raise NodecastError(f"{self.source}: empty file; expected a header row") from None
        finally:
            records.close()
        self.header_line, self.header = line, tuple(name.strip() for name in header)
        _check_header(self.source, self.header)

    def _records(self):
        try:
            with open(self.path, encoding="utf-8-sig", newline="") as file:
                reader, consumed = csv.reader(file, strict=True), 0
                try:
                    for row in reader:
                        if any(cell.strip() for cell in row):
                            yield consumed + 1, row
                        consumed = reader.line_num
                except csv.Error as exc:
                    raise NodecastError(f"{self.source}: line {reader.line_num}: malformed CSV "
                                        f"({exc})") from None
                except UnicodeDecodeError:
                    raise NodecastError(f"{self.source}: not UTF-8 text "
                                        f"({_first_bad_byte(self.path)})") from None
        except OSError as exc:
            raise NodecastError(f"cannot read {self.source}: {exc.strerror or exc}") from None

    def chunks(self, names, label=None):
        self.check_columns(list(names) + ([label] if label else []))
        records, first = self._records(), 0
        next(records)  # the header
        while True:
            batch = [record for _, record in zip(range(self.chunk_rows), records, strict=False)]
            if not batch:
                return
            for line, row in batch:
                if len(row) != len(self.header):
                    raise NodecastError(f"{self.source}: line {line} has {len(row)} fields, the "
                                        f"header has {len(self.header)}")
            table = Table(self.header, [row for _, row in batch], self.source,
                          tuple(line for line, _ in batch), self.header_line)
            labels = np.asarray(table.texts(label), dtype=object) if label else None
            yield Chunk(first, table.numbers(names), labels)
            first += len(batch)


class ParquetSource(TableSource):
    """A Parquet file read ``chunk_rows`` rows at a time (record batches, needs pyarrow)."""

    def __init__(self, path, chunk_rows: int = CHUNK_ROWS) -> None:
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise NodecastError("reading Parquet needs pyarrow (pip install pyarrow)") from None
        self.source, self.chunk_rows = str(path), chunk_rows
        try:
            self.file = pq.ParquetFile(path, pre_buffer=False)  # pre-buffering reads whole files
        except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
            raise NodecastError(f"cannot read {self.source} as Parquet: {exc}") from None
        self.header = tuple(self.file.schema_arrow.names)

    def chunks(self, names, label=None):
        import pyarrow as pa

        columns = list(dict.fromkeys(list(names) + ([label] if label else [])))
        self.check_columns(columns)
        first = 0
        for batch in self._batches(columns):
            numbers = np.empty((batch.num_rows, len(names)))
            for c, name in enumerate(names):
                numbers[:, c] = self._numbers(batch.column(name), name, first, pa)
            labels = self._labels(batch.column(label), label, first, pa) if label else None
            yield Chunk(first, numbers, labels)
            first += batch.num_rows

    def _batches(self, columns):
        """The record batches of ``columns``; a damaged part of the file is one line, naming the
        data rows read before it."""
        batches, first = self.file.iter_batches(batch_size=self.chunk_rows, columns=columns), 0
        while True:
            try:
                batch = next(batches)
            except StopIteration:
                return
            except (OSError, ValueError) as exc:  # pyarrow's ArrowInvalid is a ValueError
                raise NodecastError(f"cannot read {self.source} as Parquet after data row {first}: "
                                    f"{' '.join(str(exc).split())}") from None
            first += batch.num_rows
            yield batch

    def _missing(self, column, name, first):
        if column.null_count:
            row = first + int(np.flatnonzero(column.is_null().to_numpy(zero_copy_only=False))[0])
            raise NodecastError(f"{self.source}: data row {row + 1}, column {name!r}: empty cell "
                                "(missing value)")

    def _numbers(self, column, name, first, pa):
        kind = column.type
        if not (pa.types.is_integer(kind) or pa.types.is_floating(kind) or pa.types.is_boolean(kind)):
            raise NodecastError(f"{self.source}: column {name!r} holds {kind}, not numbers")
        self._missing(column, name, first)
        return column.to_numpy(zero_copy_only=False).astype(np.float64)

    def _labels(self, column, name, first, pa):
        self._missing(column, name, first)
        text = column.cast(pa.string()).to_numpy(zero_copy_only=False)
        return np.asarray([value.strip() for value in text], dtype=object)


class SpilledSource(TableSource):
    """A source parsed once: the first pass also writes each chunk's parsed columns to a temporary
    folder (float64 .npy files, about 8 bytes per number), later passes read them back, exactly.
    The folder is removed when the source is closed or collected."""

    def __init__(self, inner: TableSource) -> None:
        self.inner, self.header, self.source = inner, inner.header, inner.source
        self.folder = None
        self.key = None
        self.count = 0

    def check_columns(self, names) -> None:
        self.inner.check_columns(names)

    def chunks(self, names, label=None):
        key = (tuple(names), label)
        if self.folder is not None and key == self.key:
            yield from self._read_back(label is not None)
            return
        self.close()
        complete = False
        try:
            with self._spill_errors():
                self.folder = tempfile.TemporaryDirectory(prefix="nodecast-")
            self.key, self.count = key, 0
            for chunk in self.inner.chunks(names, label):
                with self._spill_errors():
                    np.save(self._path(self.count, "x"), chunk.numbers)
                    if chunk.labels is not None:
                        np.save(self._path(self.count, "y"), chunk.labels.astype(str))
                self.count += 1
                yield chunk
            complete = True
        finally:
            if not complete:
                self.close()

    @contextlib.contextmanager
    def _spill_errors(self):
        """A full or unwritable temporary folder: one line that says what to do, not a traceback."""
        try:
            yield
        except OSError as exc:
            where = f" {self.folder.name}" if self.folder is not None else ""
            raise NodecastError(f"{self.source}: cannot keep the parsed copy of the file in the "
                                f"temporary folder{where} ({exc.strerror or exc}); free space "
                                "there or set TMPDIR to a folder with room (8 bytes per number "
                                "read)") from None

    def _read_back(self, with_labels: bool):
        first = 0
        for index in range(self.count):
            numbers = np.load(self._path(index, "x"))
            labels = np.load(self._path(index, "y")).astype(object) if with_labels else None
            yield Chunk(first, numbers, labels)
            first += numbers.shape[0]

    def _path(self, index: int, kind: str) -> str:
        return os.path.join(self.folder.name, f"{index:08d}{kind}.npy")

    def close(self) -> None:
        if self.folder is not None:
            self.folder.cleanup()
            self.folder = self.key = None


def open_source(path, chunk_rows: int | None = None) -> TableSource:
    """The training table at ``path``: Parquet by suffix, else CSV; a CSV file up to
    ``IN_MEMORY_BYTES`` is read whole unless ``chunk_rows`` is given (the model is the same)."""
    size = chunk_rows or CHUNK_ROWS
    if str(path).lower().endswith(PARQUET_SUFFIXES):
        return ParquetSource(path, size)
    try:
        small = os.path.getsize(path) <= IN_MEMORY_BYTES
    except OSError as exc:
        raise NodecastError(f"cannot read {path}: {exc.strerror or exc}") from None
    if chunk_rows is None and small:
        return MemorySource(read_table(path), size)
    return SpilledSource(CsvSource(path, size))


def _first_bad_byte(path) -> str:
    """Where a file stops being UTF-8, as "<reason> at byte N" (N from the file's start): the text
    reader decodes ahead of the rows it hands out, so the row it was at does not say where."""
    import codecs

    decoder, offset = codecs.getincrementaldecoder("utf-8")(), 0
    with open(path, "rb") as file:
        for block in iter(lambda: file.read(2**20), b""):
            pending = len(decoder.getstate()[0])  # bytes of a sequence cut by the last block
            try:
                decoder.decode(block)
            except UnicodeDecodeError as exc:
                return f"{exc.reason} at byte {offset - pending + exc.start}"
            offset += len(block)
    try:
        decoder.decode(b"", final=True)
    except UnicodeDecodeError as exc:
        return f"{exc.reason} at byte {offset - len(exc.object) + exc.start}"
    return "a decoding error"

"""Dask collections as row partitions for a cluster fit: a training file read by the workers, or
the dask arrays and dataframes given to the estimators."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.trainer.distributed import ClusterRows
from nodecast.trainer.sources import PARQUET_SUFFIXES

BLOCK_BYTES = 64 * 2**20  # bytes of CSV per partition when reading a file on the cluster


def _frame_part(frame, features, targets, classify):
    """(X, Y or labels) of a pandas partition."""
    X = frame[list(features)].to_numpy(dtype=np.float64)
    if classify:
        return X, _labels(frame[targets[0]], targets[0])
    return X, frame[list(targets)].to_numpy(dtype=np.float64)


def _labels(column, name):
    """Class labels as the single-process readers give them: the text of a text column, stripped;
    numbers and booleans written by pyarrow as :class:`~nodecast.trainer.sources.ParquetSource`
    does (2.0 is "2" and True "true", not pandas' "2.0" and "True"). A missing or empty label is
    refused, as it is there (pandas would make a class "" or "None" of it)."""
    import pandas
    import pyarrow as pa

    if column.isna().any():
        raise NodecastError(f"column {name!r}: empty cell (missing value)")
    if pandas.api.types.is_numeric_dtype(column) or pandas.api.types.is_bool_dtype(column):
        text = pa.array(column.to_numpy()).cast(pa.string()).to_pylist()
    else:
        text = column.astype(str).tolist()
    labels = np.asarray([value.strip() for value in text], dtype=object)
    if (labels == "").any():
        raise NodecastError(f"column {name!r}: empty cell (missing value)")
    return labels


def frame_rows(frame, features, targets, classify: bool) -> ClusterRows:
    """Partitions of a dask dataframe, in order."""
    from dask import delayed

    return ClusterRows([delayed(_frame_part)(part, features, targets, classify)
                        for part in frame.to_delayed()])


def _exact_floats() -> dict:
    """pandas' option for correctly rounded decimal parsing (the values Python's float() gives, as
    the single-process reader): the default from pandas 3, "round_trip" before."""
    import pandas

    return {} if int(pandas.__version__.split(".")[0]) >= 3 else {"float_precision": "round_trip"}


def _ends_lines_with_newline(path, probe: int = 2**20) -> bool:
    """Whether the file's first line ends in "\n" (or "\r\n"): the workers split a CSV file into
    byte blocks at "\n", and a file whose lines end in "\r" alone has none, so that every block
    would read the whole file (every row counted once per block). Such a file is one partition."""
    with open(path, "rb") as file:
        head = file.read(probe)
    cr, lf = head.find(b"\r"), head.find(b"\n")
    return not (cr >= 0 and (lf < 0 or lf > cr + 1))


def file_partitions(path, job) -> tuple[tuple[str, ...], ClusterRows]:
    """The header of the training file and its partitions, read by the workers (the file must be
    at the same path for every worker: a shared file system or object store)."""
    import dask.dataframe as dd

    from nodecast.trainer.sources import open_source
    from nodecast.trainer.training import feature_columns

    header = open_source(path, chunk_rows=1).header  # reads the header only
    features = feature_columns(header, job)
    classify = job.task == "classification"
    columns = list(dict.fromkeys(list(features) + list(job.targets)))
    missing = [name for name in columns if name not in header]
    if missing:
        raise NodecastError(f"{path}: missing column(s) {', '.join(map(repr, missing))}")
    if str(path).lower().endswith(PARQUET_SUFFIXES):
        frame = dd.read_parquet(path, columns=columns, split_row_groups=True)  # a partition per group
    else:
        # every column is parsed (the unused ones as text): with only the used columns, pandas
        # silently drops the fields of a record longer than the header, which one process refuses
        types = {name: object for name in header} | {name: np.float64 for name in columns}
        if classify:
            types[job.targets[0]] = object
        blocks = BLOCK_BYTES if _ends_lines_with_newline(path) else None
        frame = dd.read_csv(path, dtype=types, blocksize=blocks, na_filter=False,
                            skipinitialspace=True, encoding="utf-8-sig", **_exact_floats())
        frame = frame[columns]
    return header, frame_rows(frame, features, job.targets, classify)

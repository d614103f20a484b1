"""The estimators' ``fit`` on dask arrays and dataframes: the cluster passes of
:mod:`nodecast.trainer.distributed` on the collection's partitions, run by the current Dask scheduler
(a ``dask.distributed`` Client if one is active). Same hidden layer as ``fit`` on the same rows in
memory; output weights equal up to rounding (within 1e-10 relative in the tests)."""

from __future__ import annotations

import numpy as np

from nodecast.trainer.distributed import ClusterRows, fit_on_cluster, worker_failures
from nodecast.trainer.streamed_fit import StreamedFit


def is_dask_collection(value) -> bool:
    try:
        from dask import is_dask_collection as check
    except ImportError:
        return False
    return check(value)


def _pair(X, y):
    X = X.to_numpy(dtype=np.float64) if hasattr(X, "to_numpy") else np.asarray(X, dtype=np.float64)
    y = y.to_numpy() if hasattr(y, "to_numpy") else np.asarray(y)
    return X, y


def _rows(X, y) -> tuple[ClusterRows, list | None]:
    """Partitions (X, y) and the feature names of a dataframe (None for arrays)."""
    from dask import delayed

    if hasattr(X, "columns"):
        xs = X.to_delayed()
        ys = y.to_delayed() if is_dask_collection(y) else None
        if ys is None or len(ys) != len(xs):
            raise ValueError("a dask dataframe X needs y as a dask series or dataframe with the same "
                             "partitions")
        ys = [v for v in np.ravel(np.asarray(ys, dtype=object))]
        return ClusterRows([delayed(_pair)(a, b) for a, b in zip(xs, ys, strict=True)]), list(X.columns)
    if not is_dask_collection(y):
        import dask.array as da

        y = da.from_array(np.asarray(y), chunks=(X.chunks[0],) + ((-1,) if np.ndim(y) == 2 else ()))
    return array_rows(X, y), None


def fit_dask(estimator, X, y, classify: bool):
    """Fit ``estimator`` to dask X and y; returns the estimator."""
    from dask import delayed

    rows, names = _rows(X, y)
    with worker_failures():
        parts = rows.compute([delayed(_summary)(p, classify) for p in rows.parts])
        n = parts[0][0].shape[0]
        low = np.min([p[0] for p in parts], axis=0)
        high = np.max([p[1] for p in parts], axis=0)
        rows.lengths = [p[2] for p in parts]
        one_d = parts[0][4]
        fit = StreamedFit(estimator, "classification" if classify else "regression", n)
        if classify:
            fit.start(sum(rows.lengths), classes=set().union(*(p[3] for p in parts)), box=(low, high))
        else:
            y_low = np.min([p[3][0] for p in parts if p[2]], axis=0)
            y_high = np.max([p[3][1] for p in parts if p[2]], axis=0)
            fit.start(sum(rows.lengths), y_low, y_high, box=(low, high))
        fit_on_cluster(fit, _as_2d(rows, classify), "all", None, 0.0, 0)
    if not classify:
        estimator._y_was_1d_ = one_d
    if names is not None:
        estimator.feature_names_in_ = np.asarray(names, dtype=object)
    return estimator


def _summary(part, classify):
    """(X low, X high, rows, labels or (y low, y high), y was 1-D) of a partition."""
    X, y = part
    if not np.all(np.isfinite(X)):
        raise ValueError("Input X contains NaN or infinity.")
    n = X.shape[1]
    low = X.min(axis=0) if len(X) else np.full(n, np.inf)
    high = X.max(axis=0) if len(X) else np.full(n, -np.inf)
    if classify:
        return low, high, len(X), set(np.asarray(y, dtype=object).tolist()), False
    Y = np.asarray(y, dtype=np.float64).reshape(len(X), -1)
    if not np.all(np.isfinite(Y)):
        raise ValueError("Input y contains NaN or infinity.")
    ranges = (Y.min(axis=0), Y.max(axis=0)) if len(Y) else None
    return low, high, len(X), ranges, np.ndim(y) == 1


def _as_2d(rows: ClusterRows, classify: bool) -> ClusterRows:
    from dask import delayed

    return ClusterRows([delayed(_two_d)(p, classify) for p in rows.parts], rows.lengths)


def _two_d(part, classify):
    X, y = part
    return X, (np.asarray(y) if classify else np.asarray(y, dtype=np.float64).reshape(len(X), -1))


def array_rows(X, y) -> ClusterRows:
    """Partitions of dask arrays X (rows, n) and y (rows,) or (rows, t), split by X's row chunks."""
    from dask import delayed

    X = X.rechunk({1: -1}) if X.ndim == 2 else X
    y = y.rechunk({0: X.chunks[0]} if y.ndim == 1 else {0: X.chunks[0], 1: -1})
    xs, ys = X.to_delayed().ravel(), y.to_delayed().ravel()
    lengths = list(X.chunks[0]) if not any(np.isnan(X.chunks[0])) else None
    parts = [delayed(_array_part)(a, b) for a, b in zip(xs, ys, strict=True)]
    return ClusterRows(parts, lengths)


def _array_part(X, y):
    return np.asarray(X, dtype=np.float64), np.asarray(y)

"""What a streamed or cluster model selection measures on its first pass: per fold, the rows, the
input ranges and the target ranges of the rows in that fold, merged over chunks or partitions.
A fold's training rows are the rows of every other fold, so its training box and target range are
the minimum and maximum over the other folds, the numbers an in-memory fold computes on its
training rows."""

from __future__ import annotations

import numpy as np


class FoldStats:
    """Per fold: ``counts`` (folds,), ``x_low``/``x_high`` (folds, n) and, for regression,
    ``y_low``/``y_high`` (folds, t) of the rows whose fold it is."""

    def __init__(self, folds: int, n_features: int, n_targets: int | None) -> None:
        self.folds = folds
        self.counts = np.zeros(folds, dtype=np.int64)
        self.x_low, self.x_high = _empty_range((folds, n_features))
        self.y_low = self.y_high = None
        if n_targets is not None:
            self.y_low, self.y_high = _empty_range((folds, n_targets))

    def update(self, X: np.ndarray, Y, ids: np.ndarray) -> None:
        """Rows X (r, n) with targets Y (r, t) (or labels, not measured) in folds ``ids`` (r,)."""
        self.counts += np.bincount(ids, minlength=self.folds)
        for fold in np.unique(ids):
            rows = ids == fold
            np.minimum(self.x_low[fold], X[rows].min(axis=0), out=self.x_low[fold])
            np.maximum(self.x_high[fold], X[rows].max(axis=0), out=self.x_high[fold])
            if self.y_low is not None:
                np.minimum(self.y_low[fold], Y[rows].min(axis=0), out=self.y_low[fold])
                np.maximum(self.y_high[fold], Y[rows].max(axis=0), out=self.y_high[fold])

    def merge(self, other: FoldStats) -> None:
        self.counts += other.counts
        for name in ("x_low", "y_low"):
            if getattr(self, name) is not None:
                np.minimum(getattr(self, name), getattr(other, name), out=getattr(self, name))
        for name in ("x_high", "y_high"):
            if getattr(self, name) is not None:
                np.maximum(getattr(self, name), getattr(other, name), out=getattr(self, name))

    def training_box(self, fold: int, declared_low, declared_high):
        """(low, high) of fold ``fold``'s training rows, declared bounds where not NaN."""
        low = np.delete(self.x_low, fold, axis=0).min(axis=0)
        high = np.delete(self.x_high, fold, axis=0).max(axis=0)
        return (np.where(np.isnan(declared_low), low, declared_low),
                np.where(np.isnan(declared_high), high, declared_high))

    def target_range(self, fold: int):
        """(low, high) of the targets of fold ``fold``'s training rows (None: classification)."""
        if self.y_low is None:
            return None, None
        return (np.delete(self.y_low, fold, axis=0).min(axis=0),
                np.delete(self.y_high, fold, axis=0).max(axis=0))


def _empty_range(shape):
    """(low, high) before any row: +inf and -inf."""
    return np.full(shape, np.inf), np.full(shape, -np.inf)

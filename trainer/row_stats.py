"""Counts, target ranges and labels of rows seen in pieces (chunks or partitions), and the
finiteness check that names a row by its place in the whole table."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from nodecast.compiler.errors import NodecastError


@dataclass
class RowStats:
    """Counts and ranges of some of the rows: all of them, or those not held out."""

    rows: int = 0
    y_low: np.ndarray | None = None
    y_high: np.ndarray | None = None
    labels: set = field(default_factory=set)

    def update(self, Y, labels) -> None:
        self.rows += len(Y) if labels is None else len(labels)
        if labels is not None:
            self.labels.update(labels.tolist())
        elif len(Y):
            low, high = Y.min(axis=0), Y.max(axis=0)
            self.y_low = low if self.y_low is None else np.minimum(self.y_low, low)
            self.y_high = high if self.y_high is None else np.maximum(self.y_high, high)

    def merge(self, other: RowStats) -> None:
        """Take in the stats of other rows (a partition measured elsewhere)."""
        self.rows += other.rows
        self.labels |= other.labels
        if other.y_low is not None:
            self.y_low = other.y_low if self.y_low is None else np.minimum(self.y_low, other.y_low)
            self.y_high = other.y_high if self.y_high is None else np.maximum(self.y_high,
                                                                              other.y_high)


def check_finite_from(first: int, X: np.ndarray, names, what: str) -> None:
    bad = ~np.isfinite(X)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise NodecastError(f"{what} column {names[col]!r}, data row {first + row + 1}: value "
                            f"{X[row, col]!r} is not finite; training data must be finite")

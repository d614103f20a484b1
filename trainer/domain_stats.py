"""The input box of ``train`` measured chunk by chunk, with the checks of an in-memory ``train``
(:func:`nodecast.trainer.training._domain`): declared bounds where given, the data's range elsewhere,
and the number of rows outside the box."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.errors import NodecastError


class DomainStats:
    """Feed chunks of feature rows in order; then :meth:`box`."""

    def __init__(self, features, declared: dict[str, tuple[float, float]]) -> None:
        self.features, n = tuple(features), len(features)
        self.rows = 0
        self.low, self.high = np.full(n, np.inf), np.full(n, -np.inf)
        self.declared = [i for i, name in enumerate(features) if name in declared]
        bounds = [tuple(float(v) for v in declared[features[i]]) for i in self.declared]
        self.box_low = np.array([lo for lo, _ in bounds]).reshape(-1)
        self.box_high = np.array([hi for _, hi in bounds]).reshape(-1)
        self.inside = np.zeros(len(self.declared), dtype=np.int64)
        self.outside = 0

    def update(self, first: int, X: np.ndarray) -> None:
        bad = ~np.isfinite(X)
        if bad.any():
            row, col = np.argwhere(bad)[0]
            raise NodecastError(f"feature column {self.features[col]!r}, data row {first + row + 1}: "
                                f"value {X[row, col]!r} is not finite; training data must be finite")
        if X.shape[0] == 0:
            return
        self.rows += X.shape[0]
        np.minimum(self.low, X.min(axis=0), out=self.low)
        np.maximum(self.high, X.max(axis=0), out=self.high)
        if self.declared:
            D = X[:, self.declared]
            within = (D >= self.box_low) & (D <= self.box_high)
            self.inside += within.sum(axis=0)
            self.outside += int(np.sum(~within.all(axis=1)))

    def merge(self, other: DomainStats) -> None:
        """Take in the stats of other rows (a partition measured elsewhere)."""
        self.rows += other.rows
        np.minimum(self.low, other.low, out=self.low)
        np.maximum(self.high, other.high, out=self.high)
        self.inside += other.inside
        self.outside += other.outside

    def box(self) -> tuple[np.ndarray, np.ndarray, int]:
        """(low, high, rows outside), or NodecastError as the in-memory ``train`` words it."""
        low, high = self.low.copy(), self.high.copy()
        for j, i in enumerate(self.declared):
            name, lo, hi = self.features[i], self.box_low[j], self.box_high[j]
            if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
                raise NodecastError(f"--domain {name}={lo!r}:{hi!r}: bounds must be finite with LO <= HI")
            if self.inside[j] == 0:
                raise NodecastError(f"--domain {name}={lo!r}:{hi!r} contains none of the {self.rows} "
                                    f"rows ({name} spans {low[i]!r} .. {high[i]!r} in the data); "
                                    "declare a domain that covers the data")
            low[i], high[i] = lo, hi
        if self.outside == self.rows:
            raise NodecastError(f"the declared --domain contains none of the {self.rows} rows (each "
                                "is outside in some feature); declare a domain that covers the data")
        return low, high, self.outside

"""Categorical columns for training: levels read from the data, one-hot indicators for the fit.

Each level of a categorical column becomes one indicator column of the design. Its declared input
range is [0, 1 / spacing], so the estimator's normalisation puts a row's indicator at 0 or
``spacing`` in normalised space: two rows of different levels lie spacing * sqrt(2) apart there
instead of sqrt(2). The spacing is the median distance from a row to its k-th nearest neighbour in
the normalised numeric features (k the data-driven default), rounded down to a power of two: the
nodes' neighbourhoods then span several levels, so each local hyperplane measures how the target
moves between levels. With indicators 0/1 most neighbourhoods hold one level only, their fitted
slope along every indicator is 0 (the minimum-norm solution) and the network barely uses the
categories (docs/training.md measures it). A power of two keeps the level vectors in the IR the
estimator's weights scaled exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.levels import codes, ordered_levels
from nodecast.trainer.input_stage import Column

MAX_LEVELS = 1024
SPACING_SAMPLE = 2000  # rows used to measure the neighbour distance (seeded, so reproducible)
SPACING_RANGE = (2.0**-10, 1.0)


@dataclass(frozen=True)
class Design:
    """The fit's input matrix: numeric features, then one indicator per level."""

    features: tuple[str, ...]
    levels: dict[str, tuple[str, ...]]
    X: np.ndarray
    spacing: float = 1.0

    def columns(self) -> tuple[Column, ...]:
        """How each design column derives from a raw column (for the export)."""
        numeric = tuple(Column(name) for name in self.features)
        return numeric + tuple(Column(name, level=level) for name, group in self.levels.items()
                               for level in group)

    def box(self, low: np.ndarray, high: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """The numeric box extended by the indicators' [0, 1 / spacing]."""
        count = self.X.shape[1] - len(self.features)
        return (np.concatenate([low, np.zeros(count)]),
                np.concatenate([high, np.full(count, 1.0 / self.spacing)]))


def level_spacing(X: np.ndarray, n_columns: int, n_neighbors) -> float:
    """The indicators' spacing for numeric rows ``X`` in a design of ``n_columns`` columns
    (``n_neighbors``: an int, or None / "auto" / "default" for the default rule's k)."""
    from scipy.spatial import cKDTree

    explicit = isinstance(n_neighbors, (int, np.integer)) and not isinstance(n_neighbors, bool)
    k = int(n_neighbors) if explicit else max(10, 2 * (n_columns + 1))
    span = np.ptp(X, axis=0)
    U = (X - X.min(axis=0)) / np.where(span > 0, span, 1.0)
    sample = U
    if U.shape[0] > SPACING_SAMPLE:
        sample = U[np.random.default_rng(0).choice(U.shape[0], SPACING_SAMPLE, replace=False)]
    k = min(k, U.shape[0] - 1)
    if k < 1:
        return 1.0
    distance, _ = cKDTree(U).query(sample, k=k + 1)
    median = float(np.median(distance[:, -1]))
    if not median > 0:
        return 1.0
    return float(np.clip(2.0 ** np.floor(np.log2(median)), *SPACING_RANGE))


def design(table, features: tuple[str, ...], categorical: tuple[str, ...], X: np.ndarray,
           n_neighbors: int | None = None) -> Design:
    """The design of numeric rows ``X`` (columns ``features``) and the categorical columns."""
    if not categorical:
        return Design(features, {}, X)
    levels, blocks = {}, [X]
    for name in categorical:
        cells = table.texts(name)
        group = ordered_levels(cells)
        if len(group) > MAX_LEVELS:
            raise NodecastError(f"categorical column {name!r} holds {len(group)} levels, more than "
                                f"{MAX_LEVELS}; is it really categorical?")
        levels[name] = group
        blocks.append(np.eye(len(group))[codes(cells, group).astype(int)])
    n_columns = sum(block.shape[1] for block in blocks)
    return Design(features, levels, np.hstack(blocks), level_spacing(X, n_columns, n_neighbors))


def split_features(features: tuple[str, ...], categorical: tuple[str, ...],
                   targets: tuple[str, ...]) -> tuple[str, ...]:
    """The numeric features: ``features`` without the categorical columns, checked."""
    unknown = [name for name in categorical if name not in features]
    if unknown:
        where = "a target" if unknown[0] in targets else "not among the features"
        raise NodecastError(f"--categorical column {unknown[0]!r} is {where}")
    numeric = tuple(name for name in features if name not in categorical)
    if not numeric:
        raise NodecastError("every feature is categorical; nodecast needs at least one numeric "
                            "feature besides the categorical ones")
    return numeric

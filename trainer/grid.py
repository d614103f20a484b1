"""The search grid, the table of cross-validated errors per grid point, and the ranking rule.

A grid point is (nodes M, neighbours k, slope scale s, ridge lambda). Its validation error is the
RMSE in target units on each fold's validation rows; the table keeps every fold's value and their
mean and spread (sample standard deviation over folds). Points are ranked by their score, the mean
over targets of (mean RMSE / target range), which for one target orders points as the RMSE does;
ties go to fewer nodes, then larger ridge, then smaller k and s, so the choice is deterministic.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError


@dataclass(frozen=True)
class Grid:
    """The axes of the search; ``neighbors`` may hold None (the generator's default k)."""

    nodes: tuple[int, ...]
    neighbors: tuple[int | None, ...]
    slope_scales: tuple[float, ...]
    ridges: tuple[float, ...]

    @property
    def size(self) -> int:
        return len(self.nodes) * len(self.neighbors) * len(self.slope_scales) * len(self.ridges)


def make_grid(nodes, neighbors, slope_scales, ridges) -> Grid:
    """Validate and sort the axes (duplicates dropped); raise NodecastError naming a bad value."""
    nodes = _axis(nodes, "nodes", lambda v: _is_int(v) and v >= 1, "positive integers")
    neighbors = _axis(neighbors, "neighbors", lambda v: v is None or (_is_int(v) and v >= 1),
                      "positive integers (or None for the default)")
    slope_scales = _axis(slope_scales, "slope_scales", lambda v: _is_real(v) and v > 0,
                         "positive numbers")
    ridges = _axis(ridges, "ridges", lambda v: _is_real(v) and v >= 0, "finite numbers >= 0")
    return Grid(tuple(int(v) for v in sorted(set(nodes))),
                tuple(sorted(set(neighbors), key=lambda v: -1 if v is None else v)),
                tuple(float(v) for v in sorted(set(slope_scales))),
                tuple(float(v) for v in sorted(set(ridges))))


def _is_int(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _is_real(value) -> bool:
    return _is_int(value) or (isinstance(value, (float, np.floating)) and math.isfinite(value))


def _axis(values, name: str, valid, rule: str) -> list:
    values = list(values)
    if not values:
        raise NodecastError(f"{name} needs at least one value")
    for value in values:
        if not valid(value):
            raise NodecastError(f"{name} takes {rule}, got {value!r}")
    return values


@dataclass(frozen=True)
class GridPoint:
    """One grid point's cross-validated record (errors in target units, one entry per target)."""

    nodes: int
    neighbors: int | None
    slope_scale: float
    ridge: float
    rmse_mean: tuple[float, ...]
    rmse_std: tuple[float, ...]
    fold_rmse: tuple[tuple[float, ...], ...]
    max_abs_error: tuple[float, ...]
    score: float
    estimate: float | None = None
    meets_budget: bool = True

    @property
    def params(self) -> dict:
        """Estimator parameters of this point."""
        return {"n_nodes": self.nodes, "n_neighbors": self.neighbors,
                "slope_scale": self.slope_scale, "ridge": self.ridge}

    def rank_key(self) -> tuple:
        return (self.score, self.nodes, -self.ridge, self.neighbors or 0, self.slope_scale)

    def describe(self) -> str:
        return (f"nodes={self.nodes} neighbors={self.neighbors if self.neighbors else 'default'} "
                f"slope_scale={self.slope_scale:g} ridge={self.ridge:g}")

    def as_dict(self) -> dict:
        return {"nodes": self.nodes, "neighbors": self.neighbors, "slope_scale": self.slope_scale,
                "ridge": self.ridge, "rmse_mean": list(self.rmse_mean),
                "rmse_std": list(self.rmse_std), "fold_rmse": [list(f) for f in self.fold_rmse],
                "max_abs_error": list(self.max_abs_error), "score": self.score,
                "estimate": _finite_or_none(self.estimate), "meets_budget": self.meets_budget}


def _finite_or_none(value):
    """JSON has no infinity: an estimate the precision cannot represent is written as null."""
    return value if value is None or math.isfinite(value) else None


def tabulate(grid: Grid, units: dict, target_range: np.ndarray, tolerance: float | None):
    """Grid points from the unit scores.

    units : maps (k, s) to a list over folds of :class:`~nodecast.trainer.cv_units.UnitScores`.
    target_range : ndarray of shape (t,), the spread of each target (the score's normaliser).
    """
    points = []
    for k in grid.neighbors:
        for s in grid.slope_scales:
            folds = units[(k, s)]
            rmse = np.stack([u.rmse for u in folds])  # (folds, ridges, nodes, t)
            max_abs = np.max(np.stack([u.max_abs for u in folds]), axis=0)
            estimate = (np.max(np.stack([u.estimate for u in folds]), axis=0)
                        if folds[0].estimate is not None else None)
            for r, ridge in enumerate(grid.ridges):
                for p, m in enumerate(grid.nodes):
                    points.append(_point(m, k, s, ridge, rmse[:, r, p], max_abs[r, p],
                                         None if estimate is None else float(estimate[r, p]),
                                         target_range, tolerance))
    return points


def _point(m, k, s, ridge, fold_rmse, max_abs, estimate, target_range, tolerance) -> GridPoint:
    mean = fold_rmse.mean(axis=0)
    std = fold_rmse.std(axis=0, ddof=1)
    meets = estimate is None or tolerance is None or estimate <= tolerance
    return GridPoint(m, k, s, ridge, tuple(map(float, mean)), tuple(map(float, std)),
                     tuple(tuple(map(float, row)) for row in fold_rmse), tuple(map(float, max_abs)),
                     float(np.mean(mean / target_range)), estimate, bool(meets))


def ranked(points) -> list[GridPoint]:
    """Points meeting the budget, best first."""
    return sorted((p for p in points if p.meets_budget), key=GridPoint.rank_key)

"""The search grid, the table of cross-validated errors per grid point, and the ranking rule.

A grid point is (nodes M, hidden layer, ridge lambda), the hidden layer being a generator and one
value of each of its own hyper-parameters (:class:`~nodecast.trainer.method_grid.LayerSpec`, for
example data-driven with neighbours k and slope scale s). Its validation error is the RMSE in
target units on each fold's validation rows; the table keeps every fold's value and their mean and
spread (sample standard deviation over folds). Points are ranked by their score, the mean over
targets of (mean RMSE / target range), which for one target orders points as the RMSE does; ties go
to fewer nodes, then larger ridge, then the generator's name and smaller hyper-parameters, so the
choice is deterministic.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.trainer.method_grid import LayerSpec, layer_grid


@dataclass(frozen=True)
class Grid:
    """The axes of the search: node counts, ridge values and the hidden layers to draw."""

    nodes: tuple[int, ...]
    ridges: tuple[float, ...]
    layers: tuple[LayerSpec, ...]

    @property
    def size(self) -> int:
        return len(self.nodes) * len(self.layers) * len(self.ridges)

    @property
    def methods(self) -> tuple[str, ...]:
        return tuple(dict.fromkeys(layer.method for layer in self.layers))

    def as_dict(self) -> dict:
        return {"nodes": list(self.nodes), "ridges": list(self.ridges),
                "layers": [layer.as_dict() for layer in self.layers]}


def make_grid(nodes, ridges, layers=None) -> Grid:
    """Validate and sort the axes (duplicates dropped); raise NodecastError naming a bad value.

    layers : LayerSpec sequence (:func:`~nodecast.trainer.method_grid.layer_grid`); None: the
    data-driven generator's default grid.
    """
    nodes = _axis(nodes, "nodes", lambda v: _is_int(v) and v >= 1, "positive integers")
    ridges = _axis(ridges, "ridges", lambda v: _is_real(v) and v >= 0, "finite numbers >= 0")
    layers = tuple(layers) if layers is not None else layer_grid(["data-driven"], {})
    return Grid(tuple(int(v) for v in sorted(set(nodes))),
                tuple(float(v) for v in sorted(set(ridges))), layers)


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
    layer: LayerSpec
    ridge: float
    rmse_mean: tuple[float, ...]
    rmse_std: tuple[float, ...]
    fold_rmse: tuple[tuple[float, ...], ...]
    max_abs_error: tuple[float, ...]
    score: float
    estimate: float | None = None
    meets_budget: bool = True

    @property
    def method(self) -> str:
        return self.layer.method

    @property
    def neighbors(self) -> int | None:
        return self.layer.kwargs.get("n_neighbors")

    @property
    def slope_scale(self) -> float | None:
        return self.layer.kwargs.get("slope_scale")

    @property
    def params(self) -> dict:
        """Estimator parameters of this point."""
        return {"n_nodes": self.nodes, "method": self.method, **self.layer.kwargs,
                "ridge": self.ridge}

    def rank_key(self) -> tuple:
        return (self.score, self.nodes, -self.ridge, self.layer.sort_key())

    def describe(self) -> str:
        return f"nodes={self.nodes} {self.layer.describe()} ridge={self.ridge:g}"

    def as_dict(self) -> dict:
        return {"nodes": self.nodes, **self.layer.as_dict(), "ridge": self.ridge,
                "rmse_mean": list(self.rmse_mean),
                "rmse_std": list(self.rmse_std), "fold_rmse": [list(f) for f in self.fold_rmse],
                "max_abs_error": list(self.max_abs_error), "score": self.score,
                "estimate": _finite_or_none(self.estimate), "meets_budget": self.meets_budget}


def _finite_or_none(value):
    """JSON has no infinity: an estimate the precision cannot represent is written as null."""
    return value if value is None or math.isfinite(value) else None


def tabulate(grid: Grid, units: dict, target_range: np.ndarray, tolerance: float | None):
    """Grid points from the unit scores.

    units : maps each LayerSpec of the grid to a list over folds of
        :class:`~nodecast.trainer.cv_units.UnitScores`.
    target_range : ndarray of shape (t,), the spread of each target (the score's normaliser).
    """
    points = []
    for layer in grid.layers:
        folds = units[layer]
        rmse = np.stack([u.rmse for u in folds])  # (folds, ridges, nodes, t)
        max_abs = np.max(np.stack([u.max_abs for u in folds]), axis=0)
        estimate = (np.max(np.stack([u.estimate for u in folds]), axis=0)
                    if folds[0].estimate is not None else None)
        for r, ridge in enumerate(grid.ridges):
            for p, m in enumerate(grid.nodes):
                points.append(_point(m, layer, ridge, rmse[:, r, p], max_abs[r, p],
                                     None if estimate is None else float(estimate[r, p]),
                                     target_range, tolerance))
    return points


def _point(m, layer, ridge, fold_rmse, max_abs, estimate, target_range, tolerance) -> GridPoint:
    mean = fold_rmse.mean(axis=0)
    std = fold_rmse.std(axis=0, ddof=1)
    meets = estimate is None or tolerance is None or estimate <= tolerance
    return GridPoint(m, layer, ridge, tuple(map(float, mean)), tuple(map(float, std)),
                     tuple(tuple(map(float, row)) for row in fold_rmse), tuple(map(float, max_abs)),
                     float(np.mean(mean / target_range)), estimate, bool(meets))


def ranked(points) -> list[GridPoint]:
    """Points meeting the budget, best first."""
    return sorted((p for p in points if p.meets_budget), key=GridPoint.rank_key)

"""Fast k-fold model selection over nodes M, the hidden-node generator and its own hyper-parameters
(data-driven: neighbours k and slope scale s) and ridge lambda, optionally under a precision budget
(the estimated export error in a named precision must not exceed a tolerance in target units).

The search runs one unit per (fold, hidden layer) (:mod:`nodecast.trainer.cv_units`): one hidden
layer of max(M) nodes drawn from the fold's training rows, one pass over those rows, every
(lambda, M) pair solved from one factorisation per lambda. Units are independent and may run in
parallel; the result does not depend on ``n_jobs``. The chosen point is refitted on all rows with
the same draw rule and seed, so ``nodecast train`` with the chosen options reproduces the model exactly.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from dataclasses import dataclass, field
from types import SimpleNamespace
from typing import Any

import numpy as np

from nodecast.compiler.bounds import Certificate
from nodecast.compiler.domain_points import domain_probes
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.cv_units import UnitSettings, evaluate_unit
from nodecast.trainer.folds import fold_indices, input_box
from nodecast.trainer.grid import Grid, GridPoint, make_grid, ranked, tabulate
from nodecast.trainer.method_grid import layer_grid

PARALLEL_WORK = 2e9  # N_train * max(M)^2 of the units above which n_jobs=None runs them in parallel
SCREEN_PROBES = 256  # Sobol probes, and at most as many of the box's corners, per fold estimate
MAX_REFITS = 5  # candidates refitted on all rows when the final estimate misses the tolerance


@dataclass(frozen=True)
class SearchSettings:
    """Everything a search needs besides the data and the grid."""

    folds: int = 10
    seed: int = 0
    activation: str = "logistic"
    precision: str | None = None
    tolerance: float | None = None
    n_jobs: int | None = None


@dataclass(eq=False)
class SelectionResult:
    """The table of every grid point, the chosen point, and the model refitted on all rows.

    ``model`` is what the final fit returned (a fitted RandomNodeRegressor from :func:`select`);
    ``estimate`` the export-error estimate of the final model in ``settings.precision`` (or None).
    """

    points: list[GridPoint]
    chosen: GridPoint
    settings: SearchSettings
    grid: Grid
    model: Any = None
    estimate: Certificate | None = None
    refits: int = 1
    growth: Any = None
    diagnostics: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        """Every number of the search, JSON-ready (no timings, so equal inputs give equal text)."""
        s = self.settings
        return {"folds": s.folds, "seed": s.seed, "activation": s.activation,
                "precision": s.precision, "tolerance": s.tolerance,
                "grid": self.grid.as_dict(),
                "points": [p.as_dict() for p in self.points], "chosen": self.chosen.as_dict(),
                "rejected_by_budget": sum(not p.meets_budget for p in self.points),
                "final_estimate": self.estimate.as_dict() if self.estimate else None,
                "refits": self.refits, "diagnostics": self.diagnostics,
                "growth": self.growth.as_dict() if self.growth is not None else None}


def select(X, y, nodes=(50, 100, 250), neighbors=None, slope_scales=None, ridges=(0.0, 1e-6),
           folds=10, *, methods=("data-driven",), intervals=None, angle_ranges=None,
           weight_sums=None, seed=0, domain=None, activation="logistic", precision=None,
           tolerance=None, n_jobs=None, progress=None, grow=None) -> SelectionResult:
    """Choose (M, generator and its settings, lambda) by k-fold cross-validation and refit the
    choice on all rows.

    Parameters
    ----------
    X : array-like of shape (n_samples, n_features); y : array-like of shape (n_samples,) or
        (n_samples, n_targets), numeric targets.
    nodes, ridges : the shared grid axes.
    methods : generator names to search (:data:`nodecast.trainer.generators.GENERATORS`).
    neighbors, slope_scales : data-driven k (``None`` in the list: the default k) and s;
    intervals : u of interval and domain-anchored; angle_ranges : (min, max) degrees of
    slope-angle; weight_sums : (r, s) of weight-sum. Each None: that generator's default grid
    (:mod:`nodecast.trainer.method_grid`); values for a generator not in ``methods`` are an error.
    folds : int, number of folds (ten is customary); a row's fold is a hash of its input values
        (:func:`nodecast.trainer.folds.row_folds`).
    seed : int, seeds the fold split and every hidden-layer draw (the final model's random_state).
    domain : (low, high) or None, each of shape (n_features,); NaN entries are not declared and
        take the range of the rows being fitted (each fold's training rows; all rows for the
        final model).
    precision, tolerance : reject points whose estimated export error in ``precision`` ("float32",
        and whatever :func:`nodecast.compiler.bounds.certify` supports for C) exceeds ``tolerance``
        (target units); a precision alone only reports the final model's estimate.
    n_jobs : int or None, parallel units (joblib); None: every core once the units' work
        (N_train * max(M)^2 summed) exceeds ``PARALLEL_WORK``, else 1. The result is the same for
        every value.
    progress : callable(done, total) or None, called after each unit.
    grow : GrowthSettings or None; if given, the model is grown batch by batch with the chosen
        (k, s, lambda) (:mod:`nodecast.trainer.growth`) instead of refitting the chosen M.

    Returns
    -------
    SelectionResult, with ``model`` a fitted :class:`RandomNodeRegressor`.
    """
    X, Y, y_was_1d = _check_data(X, y)
    declared = _declared_box(domain, X.shape[1])
    grid = make_grid(nodes, ridges, layer_grid(methods, {
        "n_neighbors": neighbors, "slope_scale": slope_scales, "interval": intervals,
        "angle_range": angle_ranges, "weight_sum": weight_sums}))
    settings = SearchSettings(folds, seed, activation, precision, tolerance, n_jobs)
    points, diagnostics = run_search(X, Y, grid, settings, declared, progress)
    low, high = input_box(X, *declared)

    targets = Y[:, 0] if y_was_1d else Y
    if grow is not None:
        from nodecast.trainer.export import to_bundle
        from nodecast.trainer.growth import fit_grown

        point, growth = grow_best(X, Y, points, settings, declared, grow)
        model = fit_grown(X, targets, (low, high), point, settings, growth)
        estimate = checked_estimate(to_bundle(model).network, settings, point)
        return SelectionResult(points, point, settings, grid, model, estimate, 1, growth,
                               diagnostics)

    def fit_final(point: GridPoint):
        from nodecast.trainer.estimators import RandomNodeRegressor
        from nodecast.trainer.export import to_bundle

        model = RandomNodeRegressor(activation=activation, domain=(low, high), random_state=seed,
                                    **point.params).fit(X, targets)
        return model, to_bundle(model).network

    return finalise(points, grid, settings, fit_final, diagnostics)


def grow_best(X, Y, points, settings: SearchSettings, declared, growth):
    """Grow a network with the hidden layer and lambda of the best grid point meeting the budget.

    Returns (that GridPoint, GrowthResult).
    """
    from nodecast.trainer.growth import grow

    candidates = ranked(points)
    if not candidates:
        best = min(points, key=lambda p: (p.estimate, p.rank_key()))
        raise NodecastError(_no_point_message(settings, best.estimate, best))
    splits = fold_indices(X, settings.folds, settings.seed)
    probes = _screen_probes(X, declared) if settings.tolerance is not None else None
    span = Y.max(axis=0) - Y.min(axis=0)
    result = grow(X, Y, splits, declared, candidates[0], settings, growth,
                  np.where(span > 0, span, 1.0), probes)
    return candidates[0], result


def checked_estimate(network, settings: SearchSettings, point: GridPoint):
    """The final model's estimate; NodecastError when it misses the tolerance."""
    estimate = _final_estimate(network, settings.precision)
    if estimate is not None and settings.tolerance is not None and \
            estimate.max_abs > settings.tolerance:
        raise NodecastError(_no_point_message(settings, estimate.max_abs, point, refitted=True))
    return estimate


def _check_data(X, y):
    X = np.asarray(X, dtype=np.float64)
    Y = np.asarray(y, dtype=np.float64)
    y_was_1d = Y.ndim == 1
    Y = Y.reshape(Y.shape[0], -1) if Y.ndim else Y
    if X.ndim != 2 or Y.ndim != 2 or X.shape[0] != Y.shape[0]:
        raise NodecastError(f"X must be 2-D and y hold one row per row of X; got shapes "
                            f"{X.shape} and {np.shape(y)}")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(Y))):
        raise NodecastError("X and y must be finite (no NaN or infinity)")
    return X, Y, y_was_1d


def _declared_box(domain, n_features: int):
    if domain is None:
        return np.full(n_features, np.nan), np.full(n_features, np.nan)
    low, high = (np.asarray(side, dtype=np.float64).reshape(-1) for side in domain)
    if low.shape != (n_features,) or high.shape != low.shape or np.any(low > high):
        raise NodecastError("domain must be (low, high), each of one value per feature, "
                            "low <= high")
    return low, high


def run_search(X, Y, grid: Grid, settings: SearchSettings, declared, progress=None):
    """Score every grid point by cross-validation; returns (points, generator diagnostics)."""
    if settings.tolerance is not None and settings.precision is None:
        raise NodecastError("a tolerance needs a precision to estimate the export error in")
    splits = fold_indices(X, settings.folds, settings.seed)
    budget = settings.precision if settings.tolerance is not None else None
    probes = _screen_probes(X, declared) if budget else None
    keys = list(itertools.product(grid.layers, range(settings.folds)))
    jobs = [(X, Y, splits[fold], declared,
             UnitSettings(layer, grid.nodes, grid.ridges, settings.seed, settings.activation,
                          budget), probes) for layer, fold in keys]
    units: dict = {}
    n_jobs = settings.n_jobs or _auto_jobs(len(keys), X.shape[0] - len(splits[0][1]),
                                           max(grid.nodes))
    results = zip(keys, _run(jobs, n_jobs), strict=True)
    for done, ((layer, _), scores) in enumerate(results, 1):
        units.setdefault(layer, []).append(scores)
        if progress is not None:
            progress(done, len(keys))
    return tabulate_units(grid, units, Y.min(axis=0), Y.max(axis=0), settings.tolerance)


def tabulate_units(grid: Grid, units: dict, y_low, y_high, tolerance):
    """(points, generator diagnostics) from every unit's scores (``units``: LayerSpec -> list over
    folds of UnitScores) and the targets' range over all rows (the score's normaliser)."""
    span = np.asarray(y_high) - np.asarray(y_low)
    return tabulate(grid, units, np.where(span > 0, span, 1.0), tolerance), _total_diagnostics(units)


def _auto_jobs(units: int, rows: int, nodes: int) -> int:
    """Parallel only when the work pays for starting worker processes (about a second)."""
    import os

    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    return min(cores or 1, units) if units * rows * nodes**2 >= PARALLEL_WORK else 1


def _run(jobs, n_jobs: int):
    try:
        if n_jobs == 1:
            yield from (evaluate_unit(*job) for job in jobs)
            return
        from joblib import Parallel, delayed

        yield from Parallel(n_jobs=n_jobs, return_as="generator")(
            delayed(evaluate_unit)(*job) for job in jobs)
    except ValueError as exc:
        if isinstance(exc, NodecastError):
            raise
        raise NodecastError(f"cannot run the search: {' '.join(str(exc).split())}") from None


def _screen_probes(X, declared) -> np.ndarray:
    return box_probes(*input_box(X, *declared))


def box_probes(low, high) -> np.ndarray:
    """The precision budget's probes of the box [low, high]: quasi-random points and at most as
    many of its corners, evenly picked."""
    box = SimpleNamespace(n_features=len(low), domain_low=low, domain_high=high)
    probes = domain_probes(box, count=SCREEN_PROBES)
    corners = probes[SCREEN_PROBES:]
    step = max(1, -(-corners.shape[0] // SCREEN_PROBES))
    return np.vstack([probes[:SCREEN_PROBES], corners[::step]])


def _total_diagnostics(units: dict) -> dict:
    totals: dict[str, int] = {}
    for folds in units.values():
        for unit in folds:
            for key, value in unit.diagnostics.items():
                if key != "neighbors":
                    totals[key] = totals.get(key, 0) + int(value)
    return dict(sorted(totals.items()))


def finalise(points, grid: Grid, settings: SearchSettings, fit_final: Callable, diagnostics=None):
    """Refit the best point on all rows; under a budget, the best whose final estimate meets it.

    fit_final(point) -> (model, Network). Raises NodecastError naming the best estimate when no
    point meets the tolerance.
    """
    candidates = ranked(points)
    if not candidates:
        best = min(points, key=lambda p: (p.estimate, p.rank_key()))
        raise NodecastError(_no_point_message(settings, best.estimate, best))
    tried = []
    for refits, point in enumerate(candidates[:MAX_REFITS], 1):
        model, network = fit_final(point)
        try:
            estimate = _final_estimate(network, settings.precision)
        except NodecastError:
            if settings.tolerance is None:
                raise
            tried.append((float("inf"), point))
            continue
        if estimate is None or settings.tolerance is None or estimate.max_abs <= settings.tolerance:
            return SelectionResult(points, point, settings, grid, model, estimate, refits,
                                   diagnostics=diagnostics or {})
        tried.append((estimate.max_abs, point))
    best_estimate, best = min(tried, key=lambda pair: pair[0])
    raise NodecastError(_no_point_message(settings, best_estimate, best, refitted=True))


def _final_estimate(network, precision):
    if precision is None:
        return None
    try:
        from nodecast.compiler.bounds import certify

        return certify(network, "c", precision)
    except ValueError as exc:
        raise NodecastError(f"cannot bound the export error: {exc}") from None


def _no_point_message(settings, estimate: float, point: GridPoint, refitted: bool = False) -> str:
    where = "after refitting the best candidates on all rows" if refitted else "on the grid"
    return (f"no grid point meets the {settings.precision} tolerance {settings.tolerance:g} "
            f"{where}: the best estimated export error is {estimate:.3g} ({point.describe()}); "
            "raise the tolerance or add larger ridge values or fewer nodes")

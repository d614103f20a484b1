"""Model selection from a table: what ``nodecast select`` does, beside ``training.train``.

The final model of a plain search is fitted by :func:`nodecast.trainer.training.train` with the
chosen options, so its arrays are those ``nodecast train`` writes with the same options and seed;
the bundle's metadata adds the cross-validated metrics and a summary of the search.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.trainer import training
from nodecast.trainer.categorical import design, split_features
from nodecast.trainer.folds import input_box
from nodecast.trainer.selection import (
    SelectionResult,
    checked_estimate,
    finalise,
    grow_best,
    run_search,
)


def run_selection(table, job, grid, settings, growth=None, progress=None, allowed_nodes=None):
    """Search, refit (or grow) and bundle; returns (SelectionResult, Bundle).

    table : a :class:`nodecast.compiler.csvio.Table`; job : TrainingJob (targets, features,
    domain, units, seed, validation fraction); grid : Grid; settings : SearchSettings; growth :
    GrowthSettings or None; allowed_nodes : node counts that meet flash and cycle budgets (None:
    all); the others are searched (for the report's frontier) but never chosen.
    """
    features = training.feature_columns(table.header, job)
    numeric = split_features(features, job.categorical, job.targets)
    X, Y = finite_columns(table, numeric, "feature"), finite_columns(table, job.targets, "target")
    inputs = design(table, numeric, job.categorical, X)
    declared = inputs.box(*declared_box(job, numeric))  # NaN: the data's range
    X = inputs.X
    points, diagnostics = run_search(X, Y, grid, settings, declared, progress)
    points = within_budget(points, allowed_nodes)
    if growth is None:
        return finish_search(points, diagnostics, grid, settings, job,
                             lambda final: training.train(table, final), X.shape[0])
    result, bundle = _grown(X, Y, features, inputs, job, points, grid, settings, declared, growth)
    result.diagnostics = diagnostics
    return result, _with_selection(bundle, result, X.shape[0])


def within_budget(points, allowed_nodes):
    """The points, those whose node count misses the flash or cycle budget marked as not meeting
    it (None: every count is allowed)."""
    if allowed_nodes is None:
        return points
    return [p if p.nodes in allowed_nodes else replace(p, meets_budget=False) for p in points]


def finish_search(points, diagnostics, grid, settings, job, train, rows: int):
    """Refit the best point by ``train(TrainingJob) -> Bundle`` (in memory, streamed or on a
    cluster: the same arrays) and bundle it with the search's summary."""
    def fit_final(point):
        bundle = train(replace(job, params=train_options(point, settings)))
        return bundle, bundle.network

    result = finalise(points, grid, settings, fit_final, diagnostics)
    return result, _with_selection(result.model, result, rows)


def train_options(point, settings) -> dict:
    """The ``nodecast train`` options (TrainingJob.params) of a grid point."""
    return {**point.params, "activation": settings.activation}


def finite_columns(table, names, what: str) -> np.ndarray:
    values = table.numbers(names)
    bad = np.argwhere(~np.isfinite(values))
    if bad.size:
        row, col = bad[0]
        raise NodecastError(f"{what} column {names[col]!r}, data row {row + 1}: value "
                            f"{values[row, col]!r} is not finite; data must be finite")
    return values


def declared_box(job, features):
    unknown = sorted(set(job.domain) - set(features))
    if unknown:
        raise NodecastError(f"--domain names unknown feature(s): {', '.join(map(repr, unknown))}")
    low = np.array([job.domain.get(name, (np.nan, np.nan))[0] for name in features], dtype=float)
    high = np.array([job.domain.get(name, (np.nan, np.nan))[1] for name in features], dtype=float)
    return low, high


def _grown(X, Y, features, inputs, job, points, grid, settings, declared, growth):
    from nodecast.trainer.export import stage_to_bundle
    from nodecast.trainer.growth import fit_grown
    from nodecast.trainer.input_stage import InputStage

    point, grown = grow_best(X, Y, points, settings, declared, growth)
    model = fit_grown(X, Y, input_box(X, *declared), point, settings, grown)
    error = model.predict(X).reshape(Y.shape) - Y
    metrics = {"training": {"rmse": [float(v) for v in np.sqrt(np.mean(error**2, axis=0))],
                            "max_abs_error": [float(v) for v in np.max(np.abs(error), axis=0)],
                            "rows": int(X.shape[0])}}
    stage = InputStage(model, inputs.columns(), inputs.levels, ())
    bundle = stage_to_bundle(
        stage, features, target_names=job.targets,
        feature_units={name: job.units[name] for name in inputs.features if name in job.units},
        target_units=[job.units.get(name, "") for name in job.targets],
        metadata={"seed": job.seed, "metrics": metrics, "rows": int(X.shape[0]),
                  "targets": list(job.targets)})
    estimate = checked_estimate(bundle.network, settings, point)
    return SelectionResult(points, point, settings, grid, bundle, estimate, 1, grown), bundle


def _with_selection(bundle: Bundle, result: SelectionResult, rows: int) -> Bundle:
    chosen, s = result.chosen, result.settings
    final = result.growth.best() if result.growth is not None else None
    metrics = dict(bundle.metadata.get("metrics", {}))
    metrics["cross_validation"] = {
        "folds": s.folds, "rows": rows,
        "rmse_mean": list(final["rmse_mean"] if final else chosen.rmse_mean),
        "rmse_std": list(final["rmse_std"] if final else chosen.rmse_std)}
    summary = {"folds": s.folds, "grid_points": len(result.points), "chosen": chosen.params,
               "precision": s.precision, "tolerance": s.tolerance,
               "estimate": result.estimate.max_abs if result.estimate else None,
               "rejected_by_budget": sum(not p.meets_budget for p in result.points),
               "grown": result.growth is not None,
               "kept_batches": list(result.growth.kept_batches) if result.growth else None}
    return Bundle(bundle.network, {**bundle.metadata, "metrics": metrics, "selection": summary})

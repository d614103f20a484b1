"""Training from a table: what ``nodecast train`` does, as a function the CLI and the demo share."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor
from nodecast.trainer.export import to_bundle
from nodecast.trainer.hidden import block_bounds
from nodecast.trainer.metrics import MetricSums
from nodecast.trainer.row_hash import held_out


@dataclass(frozen=True)
class TrainingJob:
    """Everything ``train`` needs besides the data."""

    targets: tuple[str, ...]
    features: tuple[str, ...] = ()
    task: str = "regression"
    domain: dict[str, tuple[float, float]] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    params: dict = field(default_factory=dict)
    seed: int = 0
    validation_fraction: float = 0.2


def feature_columns(header, job: TrainingJob) -> tuple[str, ...]:
    if job.features:
        both = [name for name in job.features if name in job.targets]
        if both:
            raise NodecastError(f"column(s) {', '.join(map(repr, both))} cannot be both a feature "
                                "and a target (the model would read its own answer)")
        return job.features
    features = tuple(name for name in header if name not in job.targets)
    if not features:
        raise NodecastError("no feature columns left besides the target(s)")
    return features


def _check_finite(X: np.ndarray, names, what: str) -> None:
    bad = ~np.isfinite(X)
    if bad.any():
        row, col = np.argwhere(bad)[0]
        raise NodecastError(f"{what} column {names[col]!r}, data row {row + 1}: value {X[row, col]!r} "
                            "is not finite; training data must be finite")


def _domain(job: TrainingJob, features, X: np.ndarray):
    """The input box: declared bounds where given, the data's range elsewhere; and the number of
    rows outside it. Rows outside a declared domain are kept (and counted); a declared range that
    is not finite, has LO > HI, or leaves no row inside the box is refused."""
    unknown = sorted(set(job.domain) - set(features))
    if unknown:
        raise NodecastError(f"--domain names unknown feature(s): {', '.join(map(repr, unknown))}")
    low, high = X.min(axis=0), X.max(axis=0)
    for i, name in enumerate(features):
        if name not in job.domain:
            continue
        lo, hi = (float(v) for v in job.domain[name])
        if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
            raise NodecastError(f"--domain {name}={lo!r}:{hi!r}: bounds must be finite with LO <= HI")
        if not np.any((X[:, i] >= lo) & (X[:, i] <= hi)):
            raise NodecastError(f"--domain {name}={lo!r}:{hi!r} contains none of the {X.shape[0]} "
                                f"rows ({name} spans {low[i]!r} .. {high[i]!r} in the data); "
                                "declare a domain that covers the data")
        low[i], high[i] = lo, hi
    outside = np.any((X < low) | (X > high), axis=1)
    if outside.all():
        raise NodecastError(f"the declared --domain contains none of the {X.shape[0]} rows (each is "
                            "outside in some feature); declare a domain that covers the data")
    return low, high, int(outside.sum())


def _check_target_varies(y: np.ndarray, names) -> None:
    for j, name in enumerate(names):
        if np.ptp(y[:, j]) == 0:
            raise NodecastError(f"target {name!r} holds the single value {y[0, j]!r} in every row; "
                                "there is nothing to learn")


def make_estimator(job: TrainingJob, low, high):
    cls = RandomNodeClassifier if job.task == "classification" else RandomNodeRegressor
    try:
        return cls(random_state=job.seed, domain=(low, high), **job.params)
    except TypeError as exc:
        raise NodecastError(f"bad training option: {exc}") from None


def train(table, job: TrainingJob) -> Bundle:
    """Fit on all rows; report validation metrics from a same-settings fit on a held-out split."""
    features = feature_columns(table.header, job)
    X = table.numbers(features)
    _check_finite(X, features, "feature")
    if X.shape[0] < 2:
        raise NodecastError(f"{table.source}: need at least 2 data rows to train, got {X.shape[0]}"
                            + (" (the file has a header only)" if X.shape[0] == 0 else ""))
    if job.task == "classification":
        if len(job.targets) != 1:
            raise NodecastError("classification takes exactly one --target column (the labels)")
        y = np.asarray(table.texts(job.targets[0]), dtype=object)
        if len(set(y)) < 2:
            raise NodecastError(f"target {job.targets[0]!r} holds a single class; need at least two")
    else:
        y = table.numbers(job.targets)
        _check_finite(y, job.targets, "target")
        _check_target_varies(y, job.targets)
    low, high, outside = _domain(job, features, X)
    estimator = make_estimator(job, low, high)
    try:
        estimator.fit(X, y)
    except ValueError as exc:
        raise NodecastError(f"cannot train: {' '.join(str(exc).split())}") from None
    metrics = {"training": _metrics(estimator, X, y, job.task)}
    metrics.update(_validation(job, low, high, X, y))
    units = dict(job.units)
    target_names = job.targets if job.task == "regression" else tuple(map(str, estimator.classes_))
    return to_bundle(
        estimator, feature_names=features, target_names=target_names,
        feature_units=[units.get(name, "") for name in features],
        target_units=[units.get(name, "") for name in target_names],
        metadata={"seed": job.seed, "metrics": metrics, "rows": int(X.shape[0]),
                  "rows_outside_domain": outside, "targets": list(job.targets),
                  "validation_fraction": job.validation_fraction})


def _validation(job: TrainingJob, low, high, X, y) -> dict:
    """Metrics of a same-settings fit on the rows not held out (:mod:`nodecast.trainer.row_hash`),
    measured on the held-out rows."""
    valid = held_out(0, X.shape[0], job.validation_fraction, job.seed)
    n_valid = int(valid.sum())
    if n_valid < 1 or X.shape[0] - n_valid < 2:
        return {}
    estimator = make_estimator(job, low, high)
    try:
        estimator.fit(X[~valid], y[~valid])
    except ValueError:
        return {}
    return {"validation": _metrics(estimator, X[valid], y[valid], job.task)}


def _metrics(estimator, X, y, task: str) -> dict:
    """Errors summed over the row blocks of a prediction pass (the blocks streaming uses too)."""
    sums = MetricSums(task)
    for start, stop in block_bounds(X.shape[0], estimator.hidden_weights_.shape[0], growing=False):
        sums.update(estimator.predict(X[start:stop]), y[start:stop])
    return sums.result()

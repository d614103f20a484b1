"""Training from a table: what ``nodecast train`` does, as a function the CLI and the demo share."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.categorical import Design, design, split_features
from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor
from nodecast.trainer.export import stage_to_bundle
from nodecast.trainer.generators.data_driven import global_stride
from nodecast.trainer.hidden import block_bounds
from nodecast.trainer.input_stage import InputStage
from nodecast.trainer.metrics import MetricSums
from nodecast.trainer.row_hash import held_out

HEAVY_TAIL_SHARE = 0.5  # a column is heavy-tailed when its middle 99% spans less of its range


def heavy_tailed(X: np.ndarray, names, strided: bool = False) -> list[str]:
    """Features whose middle 99% of values (0.5% to 99.5% quantiles) spans less than
    ``HEAVY_TAIL_SHARE`` of their range: a few extreme rows set the range, so the other rows crowd
    into a small part of the normalised box. Columns of one or two distinct values are not
    counted (a rare yes in a yes/no column is not a tail). Measured on the rows of the global
    trend (at most 20,000, evenly strided: :func:`global_stride`), which a streamed or cluster
    fit gathers too (``strided``: X holds those rows already)."""
    X = X if strided else X[:: global_stride(X.shape[0])]
    low, high = np.quantile(X, [0.005, 0.995], axis=0)
    span = np.ptp(X, axis=0)
    crowded = (high - low) < HEAVY_TAIL_SHARE * span
    return [name for j, name in enumerate(names)
            if crowded[j] and np.unique(X[:, j]).size > 2]


def heavy_tail_note(metadata: dict) -> str | None:
    """The one-line note ``train`` prints when some inputs are heavy-tailed, or None."""
    names = metadata.get("heavy_tailed_features") or []
    if not names:
        return None
    shown = ", ".join(map(repr, names[:5])) + (f" and {len(names) - 5} more" if len(names) > 5 else "")
    return (f"note: heavy-tailed input(s) {shown} (the middle 99% of the values spans under half "
            "the range); the default ridge was checked on held-out rows; a log or rank transform "
            "of such columns usually helps")


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
    categorical: tuple[str, ...] = ()


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


def _check_classes(y: np.ndarray, name: str) -> None:
    """At least two classes, and on average at least two rows per class (the rule under which
    scikit-learn also suspects a regression target): otherwise most classes are single rows that
    no classifier can learn, and the model would have as many outputs as the data has rows."""
    n_classes, n_rows = len(set(y)), len(y)
    if n_classes < 2:
        raise NodecastError(f"target {name!r} holds a single class; need at least two")
    if 2 * n_classes > n_rows:
        raise NodecastError(f"target {name!r} has {n_classes} distinct labels in {n_rows} rows, "
                            "fewer than 2 rows per class: too few to learn any class (a continuous "
                            "target? train it with --task regression)")


def make_estimator(job: TrainingJob, low, high):
    cls = RandomNodeClassifier if job.task == "classification" else RandomNodeRegressor
    try:
        return cls(random_state=job.seed, domain=(low, high),
                   check_fraction=job.validation_fraction, **job.params)
    except TypeError as exc:
        raise NodecastError(f"bad training option: {exc}") from None


def train(table, job: TrainingJob, on_stage=None) -> Bundle:
    """Fit on all rows; report validation metrics from a same-settings fit on a held-out split.

    ``on_stage``: None or callable(text, rows), told before each fit (for progress lines)."""
    features = feature_columns(table.header, job)
    numeric = split_features(features, job.categorical, job.targets)
    X = table.numbers(numeric)
    _check_finite(X, numeric, "feature")
    if X.shape[0] < 2:
        raise NodecastError(f"{table.source}: need at least 2 data rows to train, got {X.shape[0]}"
                            + (" (the file has a header only)" if X.shape[0] == 0 else ""))
    if job.task == "classification":
        if len(job.targets) != 1:
            raise NodecastError("classification takes exactly one --target column (the labels)")
        y = np.asarray(table.texts(job.targets[0]), dtype=object)
        _check_classes(y, job.targets[0])
    else:
        y = table.numbers(job.targets)
        _check_finite(y, job.targets, "target")
        _check_target_varies(y, job.targets)
    low, high, outside = _domain(job, numeric, X)
    inputs = design(table, numeric, job.categorical, X, job.params.get("n_neighbors"))
    low, high = inputs.box(low, high)
    estimator = make_estimator(job, low, high)
    if on_stage is not None:
        _check_memory(job, X, y)  # refuse in one line before any progress or warning
        on_stage("fitting on all rows", X.shape[0])
    try:
        estimator.fit(inputs.X, y)
    except ValueError as exc:
        raise NodecastError(f"cannot train: {' '.join(str(exc).split())}") from None
    metrics = {"training": _metrics(estimator, inputs.X, y, job.task)}
    if estimator.heldout_figures_ is not None:
        metrics["validation"] = estimator.heldout_figures_
    else:  # too few rows for the check set: a second, small fit
        metrics.update(_validation(job, low, high, inputs.X, y, on_stage))
    heavy = heavy_tailed(X[:, : len(numeric)], numeric)
    return model_bundle(job, estimator, features, metrics, int(X.shape[0]), outside, heavy, inputs)


def model_bundle(job: TrainingJob, estimator, features, metrics: dict, rows: int, outside: int,
                 heavy: list[str], inputs=None) -> Bundle:
    """The bundle of ``train`` (in memory, streamed or on a cluster): the fitted estimator, its
    input design (``inputs``, a :class:`~nodecast.trainer.categorical.Design`; None: the numeric
    ``features`` as they are) and the run's figures."""
    inputs = inputs or Design(tuple(features), {}, np.empty((0, len(features))))
    numeric = inputs.features
    units = dict(job.units)
    target_names = job.targets if job.task == "regression" else tuple(map(str, estimator.classes_))
    metadata = {"seed": job.seed, "metrics": metrics, "rows": rows,
                "rows_outside_domain": outside, "targets": list(job.targets),
                "heavy_tailed_features": heavy, "validation_fraction": job.validation_fraction}
    if job.categorical:
        metadata["level_spacing"] = inputs.spacing
    stage = InputStage(estimator, inputs.columns(), inputs.levels, ())
    return stage_to_bundle(
        stage, features, target_names=target_names,
        feature_units={name: units[name] for name in numeric if name in units},
        target_units=[units.get(name, "") for name in target_names], metadata=metadata)


def _check_memory(job: TrainingJob, X: np.ndarray, y: np.ndarray) -> None:
    from nodecast.trainer.memory import check_fits_in_memory

    outputs = len(set(y)) if job.task == "classification" else y.shape[1]
    try:
        check_fits_in_memory(X.shape[0], X.shape[1], int(job.params.get("n_nodes", 200)), outputs,
                             job.validation_fraction)
    except ValueError as exc:
        raise NodecastError(f"cannot train: {exc}") from None


def _validation(job: TrainingJob, low, high, X, y, on_stage=None) -> dict:
    """Metrics of a same-settings fit on the rows not held out (:mod:`nodecast.trainer.row_hash`),
    measured on the held-out rows: for data too small for the ridge's check set, whose figures
    are the validation figures otherwise."""
    valid = held_out(0, X.shape[0], job.validation_fraction, job.seed)
    n_valid = int(valid.sum())
    if n_valid < 1 or X.shape[0] - n_valid < 2:
        return {}
    if on_stage is not None:
        on_stage("validation fit", X.shape[0] - n_valid)
    fit = ~valid
    estimator = make_estimator(job, low, high)
    try:
        with warnings.catch_warnings():  # the split may hold a class once; all rows passed _check_classes
            warnings.filterwarnings("ignore", "The number of unique classes", UserWarning)
            estimator.fit(X[fit], y[fit])
    except ValueError:
        return {}
    return {"validation": _metrics(estimator, X[valid], y[valid], job.task)}


def _metrics(estimator, X, y, task: str) -> dict:
    """Errors summed over the row blocks of a prediction pass (the blocks streaming uses too)."""
    sums = MetricSums(task)
    for start, stop in block_bounds(X.shape[0], estimator.hidden_weights_.shape[0], growing=False):
        sums.update(estimator.predict(X[start:stop]), y[start:stop])
    return sums.result()

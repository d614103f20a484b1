"""Scoring a bundle on labelled data, and the gates that keep a worse model from shipping.

Metrics come from the float64 reference (:func:`nodecast.compiler.reference.predict`, inputs as
given). Regression, per target: RMSE, MAE, max error and R^2 (with a constant target R^2 is 1 for a
perfect fit and 0 otherwise, the convention scikit-learn's ``r2_score`` uses). Classification:
accuracy (a share, 0..1) and a confusion table, rows the true labels, columns the predicted ones;
labels the model never saw are added as rows (they can only be wrong).

Gates, each one pass/fail:

``max_rmse``
    RMSE of every target at most the limit (one limit for all targets, or one per target).
``min_accuracy``
    Accuracy at least the limit.
``baseline``
    An older bundle scored on the same rows. Regression fails when a target's RMSE grows by more
    than ``rmse_margin`` relative to the baseline's (default 1%: new <= old * 1.01); classification
    fails when accuracy drops by more than ``accuracy_margin`` (default 0.005, half a percentage
    point: new >= old - 0.005). The margins keep harmless retraining noise from blocking a release
    while a real regression still fails.

Report schema (``ScoreReport.as_dict()``, what ``score --report`` writes): ``passed``,
``bundle_id``, ``task``, ``source``, ``rows``, ``rows_outside_domain``, ``metrics`` (regression:
``targets``, a list of ``name``, ``rmse``, ``mae``, ``max_error``, ``r2``; classification:
``accuracy``, ``confusion`` with ``labels`` and ``matrix``, ``unknown_labels``), ``baseline`` (null,
or ``bundle_id`` and its ``metrics``), ``gates`` (a list of ``name``, ``passed``, ``value``,
``limit``, ``rule``) and ``margins``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler import reference
from nodecast.compiler.errors import NodecastError

DEFAULT_RMSE_MARGIN = 0.01
DEFAULT_ACCURACY_MARGIN = 0.005


@dataclass(frozen=True)
class ScoreReport:
    passed: bool
    document: dict

    def as_dict(self) -> dict:
        return self.document


def regression_metrics(y_true: np.ndarray, y_pred: np.ndarray, names) -> list[dict]:
    """Per target metrics; ``y_true`` and ``y_pred`` of shape (n_rows, n_targets)."""
    error = y_pred - y_true
    ss_res = np.sum(error**2, axis=0)
    ss_tot = np.sum((y_true - y_true.mean(axis=0)) ** 2, axis=0)
    out = []
    for k, name in enumerate(names):
        if ss_tot[k] > 0:
            r2 = 1.0 - ss_res[k] / ss_tot[k]
        else:
            r2 = 1.0 if ss_res[k] == 0 else 0.0
        out.append({"name": name, "rmse": float(np.sqrt(np.mean(error[:, k] ** 2))),
                    "mae": float(np.mean(np.abs(error[:, k]))),
                    "max_error": float(np.max(np.abs(error[:, k]))), "r2": float(r2)})
    return out


def classification_metrics(true_labels, predicted_labels, classes) -> dict:
    """Accuracy and the confusion table over the model's classes plus any unseen true labels."""
    unknown = sorted(set(true_labels) - set(classes))
    labels = list(classes) + unknown
    index = {label: i for i, label in enumerate(labels)}
    matrix = np.zeros((len(labels), len(labels)), dtype=np.int64)
    for truth, guess in zip(true_labels, predicted_labels, strict=True):
        matrix[index[truth], index[guess]] += 1
    accuracy = float(np.trace(matrix) / max(1, len(true_labels)))
    return {"accuracy": accuracy, "confusion": {"labels": labels, "matrix": matrix.tolist()},
            "unknown_labels": unknown}


def label_column(bundle, override: str | None = None) -> str:
    """The CSV column holding a classifier's labels: ``override`` or the bundle's ``targets``."""
    if override:
        return override
    targets = bundle.metadata.get("targets")
    if isinstance(targets, list) and len(targets) == 1 and isinstance(targets[0], str):
        return targets[0]
    raise NodecastError("this classifier bundle does not record its label column; name it with "
                        "--label-column")


def _features(bundle, table) -> np.ndarray:
    from nodecast.compiler.levels import table_rows

    net = bundle.network
    X = table_rows(table, net)
    bad = np.argwhere(~np.isfinite(X))
    if bad.size:
        row, col = bad[0]
        raise NodecastError(f"{table.source}: row {row + 2}, column {net.feature_names[col]!r}: "
                            "not a finite number")
    return X


def evaluate(bundle, table, label: str | None = None) -> dict:
    """The metrics of ``bundle`` on ``table`` (a csvio Table), as in the report's ``metrics``."""
    net = bundle.network
    if not table.rows:
        raise NodecastError(f"{table.source}: no data rows to score")
    X = _features(bundle, table)
    if net.task == "classification":
        truth = table.texts(label_column(bundle, label))
        predicted = list(reference.predict_labels(net, X))
        return classification_metrics(truth, predicted, net.class_labels)
    Y = table.numbers(net.target_names)
    if not np.all(np.isfinite(Y)):
        raise NodecastError(f"{table.source}: target columns must hold finite numbers")
    return {"targets": regression_metrics(Y, reference.predict(net, X), net.target_names)}


def _limits(values, names, option: str) -> list[float]:
    values = [float(v) for v in np.atleast_1d(values)]
    if len(values) == 1:
        return values * len(names)
    if len(values) != len(names):
        raise NodecastError(f"{option} takes one limit or one per target ({len(names)}), "
                            f"got {len(values)}")
    return values


def _gate(name, passed, value, limit, rule) -> dict:
    return {"name": name, "passed": bool(passed), "value": value, "limit": limit, "rule": rule}


def _regression_gates(metrics, max_rmse, old, rmse_margin) -> list[dict]:
    names = [t["name"] for t in metrics["targets"]]
    gates = []
    if max_rmse is not None:
        for target, limit in zip(metrics["targets"], _limits(max_rmse, names, "--max-rmse"),
                                 strict=True):
            gates.append(_gate(f"max-rmse:{target['name']}", target["rmse"] <= limit,
                               target["rmse"], limit, "RMSE <= limit"))
    if old is not None:
        for new_t, old_t in zip(metrics["targets"], old["targets"], strict=True):
            limit = old_t["rmse"] * (1.0 + rmse_margin)
            gates.append(_gate(f"baseline:{new_t['name']}", new_t["rmse"] <= limit, new_t["rmse"],
                               limit, f"RMSE <= baseline RMSE x (1 + {rmse_margin:g})"))
    return gates


def _classification_gates(metrics, min_accuracy, old, accuracy_margin) -> list[dict]:
    gates = []
    if min_accuracy is not None:
        gates.append(_gate("min-accuracy", metrics["accuracy"] >= min_accuracy,
                           metrics["accuracy"], float(min_accuracy), "accuracy >= limit"))
    if old is not None:
        limit = old["accuracy"] - accuracy_margin
        gates.append(_gate("baseline", metrics["accuracy"] >= limit, metrics["accuracy"], limit,
                           f"accuracy >= baseline accuracy - {accuracy_margin:g}"))
    return gates


def _check_comparable(bundle, baseline, label) -> None:
    new, old = bundle.network, baseline.network
    if new.task != old.task:
        raise NodecastError(f"the baseline is a {old.task} model, this one a {new.task} model")
    if new.task == "regression" and new.target_names != old.target_names:
        raise NodecastError(f"the baseline predicts {list(old.target_names)}, this model "
                            f"{list(new.target_names)}; a baseline must predict the same targets")
    if new.task == "classification" and label is None and \
            label_column(bundle) != label_column(baseline):
        raise NodecastError("the baseline's label column differs from this model's")


def score(bundle, table, max_rmse=None, min_accuracy=None, baseline=None,
          rmse_margin: float = DEFAULT_RMSE_MARGIN,
          accuracy_margin: float = DEFAULT_ACCURACY_MARGIN,
          label: str | None = None) -> ScoreReport:
    """Score ``bundle`` on ``table`` and apply the gates of the module doc."""
    net = bundle.network
    if net.task == "classification" and max_rmse is not None:
        raise NodecastError("--max-rmse is for regression models; use --min-accuracy")
    if net.task == "regression" and min_accuracy is not None:
        raise NodecastError("--min-accuracy is for classifiers; use --max-rmse")
    if rmse_margin < 0 or accuracy_margin < 0:
        raise NodecastError("baseline margins must be >= 0")
    metrics = evaluate(bundle, table, label)
    old = None
    if baseline is not None:
        _check_comparable(bundle, baseline, label)
        old = evaluate(baseline, table, label)
    if net.task == "classification":
        gates = _classification_gates(metrics, min_accuracy, old, accuracy_margin)
    else:
        gates = _regression_gates(metrics, max_rmse, old, rmse_margin)
    X = _features(bundle, table)
    document = {
        "passed": all(g["passed"] for g in gates), "bundle_id": bundle.bundle_id, "task": net.task,
        "source": table.source, "rows": len(table.rows),
        "rows_outside_domain": int(reference.outside_domain(net, X).sum()), "metrics": metrics,
        "baseline": None if old is None else {"bundle_id": baseline.bundle_id, "metrics": old},
        "gates": gates,
        "margins": {"rmse_margin": rmse_margin, "accuracy_margin": accuracy_margin},
    }
    return ScoreReport(document["passed"], document)

"""Model selection for classifiers: k-fold cross-validation over nodes M, neighbours k, slope scale
s and ridge lambda, scored by accuracy or log-loss, with the regression search's factorisation
reuse (:mod:`nodecast.trainer.cv_units`): one hidden layer of max(M) nodes and one QR factor of
the one-hot targets per (fold, k, s), every (lambda, M) solved from one factorisation per lambda.

Scores on each fold's validation rows:

* ``accuracy``: the share of rows whose highest class score is their class (ties: the first
  class, as ``predict``); ranked by the error rate 1 - accuracy;
* ``log-loss``: the mean of -ln p(true class), with the class scores turned into probabilities
  by clipping them to [``PROBABILITY_FLOOR``, 1] and dividing by their sum (the scores estimate
  the class indicators but are not probabilities; the floor bounds the loss of one confidently
  wrong row at about ln(1 / ``PROBABILITY_FLOOR``) = 6.9; :mod:`nodecast.trainer.unit_blocks`).

Points are ranked by the mean over folds; ties go to fewer nodes, then larger ridge, then smaller
k and s. The chosen point is refitted on all rows with the same seed, so ``RandomNodeClassifier``
with the chosen parameters and ``random_state=seed`` (and ``nodecast train --task classification``
with the chosen options) gives the same model. A class missing from a fold's training rows keeps
its (all-zero) indicator column there, so it is never predicted in that fold.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.errors import NodecastError
from nodecast.trainer.folds import draw_layer, fold_indices, input_box, normaliser
from nodecast.trainer.grid import make_grid
from nodecast.trainer.unit_blocks import UnitFold, ValidationSums, class_sum, solutions_of

SCORINGS = ("accuracy", "log-loss")


@dataclass(frozen=True)
class ClassPoint:
    """One grid point's cross-validated record: the fold values of the scoring (accuracy, or
    log-loss in nats), their mean and sample standard deviation, and the rank score (lower is
    better: 1 - mean accuracy, or the mean log-loss)."""

    nodes: int
    neighbors: int | None
    slope_scale: float
    ridge: float
    fold_values: tuple[float, ...]
    mean: float
    std: float
    score: float

    @property
    def params(self) -> dict:
        return {"n_nodes": self.nodes, "n_neighbors": self.neighbors,
                "slope_scale": self.slope_scale, "ridge": self.ridge}

    def rank_key(self) -> tuple:
        return (self.score, self.nodes, -self.ridge, self.neighbors or 0, self.slope_scale)


@dataclass(eq=False)
class ClassSelection:
    """Every grid point, the chosen one, the scoring, and the classifier refitted on all rows."""

    points: list[ClassPoint]
    chosen: ClassPoint
    scoring: str
    folds: int
    model: Any = None

    def describe(self) -> str:
        c = self.chosen
        return (f"nodes={c.nodes} neighbors={c.neighbors if c.neighbors else 'default'} "
                f"slope_scale={c.slope_scale:g} ridge={c.ridge:g}; {self.folds}-fold CV "
                f"{self.scoring} {c.mean:.4g} +/- {c.std:.2g}")

    def as_dict(self) -> dict:
        """Every number of the search, JSON-ready."""
        def record(p: ClassPoint) -> dict:
            return {**p.params, "fold_values": list(p.fold_values), "mean": p.mean, "std": p.std}

        return {"task": "classification", "scoring": self.scoring, "folds": self.folds,
                "points": [record(p) for p in self.points], "chosen": record(self.chosen)}


def select_classifier(X, y, nodes=(50, 100, 250), neighbors=(None,), slope_scales=(1.0,),
                      ridges=(0.0, 1e-6), folds=10, *, seed=0, scoring="accuracy", domain=None,
                      activation="logistic", n_jobs=1, refit=True) -> ClassSelection:
    """Choose (M, k, s, lambda) of a :class:`RandomNodeClassifier` by k-fold cross-validation.

    X : array-like of shape (n_samples, n_features), finite; y : labels of shape (n_samples,).
    scoring : "accuracy" or "log-loss". domain : (low, high) of shape (n_features,) each, NaN
    where not declared (the range of the rows being fitted), or None. n_jobs : parallel
    (fold, k, s) units (joblib); the result is the same for every value. Returns a
    :class:`ClassSelection` whose ``model`` is fitted on all rows (None with ``refit=False``).
    """
    from nodecast.trainer.estimators import RandomNodeClassifier

    if scoring not in SCORINGS:
        raise NodecastError(f"scoring must be one of {', '.join(SCORINGS)}, got {scoring!r}")
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or not np.all(np.isfinite(X)) or len(y) != X.shape[0]:
        raise NodecastError("X must be 2-D and finite, with one label per row")
    classes, codes = np.unique(np.asarray(y), return_inverse=True)
    if classes.size < 2:
        raise NodecastError("need samples of at least 2 classes")
    grid = _class_grid(nodes, neighbors, slope_scales, ridges)
    splits = fold_indices(X, folds, seed)
    declared = (np.full(X.shape[1], np.nan),) * 2 if domain is None else \
        tuple(np.asarray(side, dtype=np.float64).reshape(-1) for side in domain)
    keys = list(itertools.product(grid.neighbors, grid.slope_scales, range(folds)))
    jobs = [(X, codes, classes.size, splits[fold], declared, k, s, grid, seed, activation,
             scoring) for k, s, fold in keys]
    values = _run(jobs, n_jobs)  # per key: (n_ridges, n_nodes)
    points = _tabulate(grid, keys, values, scoring)
    chosen = min(points, key=ClassPoint.rank_key)
    if not refit:
        return ClassSelection(points, chosen, scoring, folds)
    model = RandomNodeClassifier(activation=activation, random_state=seed,
                                 domain=input_box(X, *declared), **chosen.params)
    return ClassSelection(points, chosen, scoring, folds, model.fit(X, np.asarray(y)))


def _class_grid(nodes, neighbors, slope_scales, ridges) -> SimpleNamespace:
    """The classifier search's axes: node counts and ridges (validated as for regression), and
    the data-driven generator's neighbours and slope scales."""
    base = make_grid(nodes, ridges)
    return SimpleNamespace(nodes=base.nodes, ridges=base.ridges,
                           neighbors=tuple(dict.fromkeys(neighbors)),
                           slope_scales=tuple(dict.fromkeys(float(s) for s in slope_scales)))


def _layer_axes(grid) -> tuple[tuple, tuple]:
    """(neighbours, slope scales) of a regression grid's data-driven layers."""
    if any(layer.method != "data-driven" for layer in grid.layers):
        raise NodecastError("classifier selection searches the data-driven generator only; "
                            "leave --method at data-driven")
    settings = [layer.kwargs for layer in grid.layers]
    return (tuple(dict.fromkeys(s.get("n_neighbors") for s in settings)),
            tuple(dict.fromkeys(float(s.get("slope_scale", 1.0)) for s in settings)))


def run_class_selection(table, job, grid, folds, activation, scoring, n_jobs):
    """``nodecast select --task classification``: search, then the final fit by
    :func:`nodecast.trainer.training.train` with the chosen options (so ``nodecast train`` with
    them writes the same arrays); returns (ClassSelection, Bundle)."""
    from nodecast.trainer import training

    if len(job.targets) != 1:
        raise NodecastError("classification takes exactly one --target column (the labels)")
    features = training.feature_columns(table.header, job)
    unknown = sorted(set(job.domain) - set(features))
    if unknown:
        raise NodecastError(f"--domain names unknown feature(s): {', '.join(map(repr, unknown))}")
    declared = tuple(np.array([job.domain.get(name, (np.nan, np.nan))[side] for name in features],
                              dtype=float) for side in (0, 1))
    neighbors, slope_scales = _layer_axes(grid)
    result = select_classifier(table.numbers(features), table.texts(job.targets[0]), grid.nodes,
                               neighbors, slope_scales, grid.ridges, folds,
                               seed=job.seed, scoring=scoring, domain=declared,
                               activation=activation, n_jobs=n_jobs, refit=False)
    return result, class_bundle(result, lambda final: training.train(table, final), job,
                                activation, len(table.rows))


def class_bundle(result: ClassSelection, train, job, activation: str, rows: int):
    """The bundle of the chosen point, fitted by ``train(TrainingJob) -> Bundle`` (in memory,
    streamed or on a cluster: the same arrays), with the cross-validated score and a summary."""
    from dataclasses import replace

    from nodecast.compiler.bundle import Bundle

    params = dict(result.chosen.params, method="data-driven", interval=1.0, activation=activation)
    bundle = train(replace(job, params=params))
    metrics = dict(bundle.metadata.get("metrics", {}))
    metrics["cross_validation"] = {"folds": result.folds, "rows": rows, "scoring": result.scoring,
                                   "mean": result.chosen.mean, "std": result.chosen.std}
    summary = {"folds": result.folds, "grid_points": len(result.points),
               "scoring": result.scoring, "chosen": result.chosen.params}
    return Bundle(bundle.network, {**bundle.metadata, "metrics": metrics, "selection": summary})


def _run(jobs, n_jobs: int) -> list[np.ndarray]:
    if n_jobs == 1:
        return [evaluate_class_unit(*job) for job in jobs]
    from joblib import Parallel, delayed

    return Parallel(n_jobs=n_jobs)(delayed(evaluate_class_unit)(*job) for job in jobs)


def evaluate_class_unit(X, codes, n_classes, split, declared, k, s, grid, seed, activation,
                        scoring) -> np.ndarray:
    """Fold values, ndarray of shape (n_ridges, n_nodes), of one (fold, k, s) unit; one BLAS
    thread (as the regression units: the same bits for any n_jobs)."""
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        train, valid = split
        offset, scale = normaliser(*input_box(X[train], *declared))
        U_train, U_valid = (X[train] - offset) / scale, (X[valid] - offset) / scale
        T_train = np.eye(n_classes)[codes[train]]
        layer = draw_layer(U_train, T_train, max(grid.nodes), seed, activation, k, s)
        kernel = get_activation(activation)
        fold = UnitFold(layer, kernel, U_train.shape[0])
        fold.push(U_train, T_train)
        sums = ValidationSums(layer, kernel, solutions_of(fold.factor, grid.ridges, grid.nodes),
                              grid.nodes, U_valid.shape[0], scoring, shared=fold.shared)
        sums.push(U_valid, codes[valid])
        return sums.values()


def fold_value(scores: np.ndarray, codes: np.ndarray, scoring: str) -> float:
    """Accuracy, or log-loss in nats, of class scores of shape (rows, n_classes)."""
    return class_sum(scores, codes, scoring) / codes.size


def _tabulate(grid, keys, values, scoring: str) -> list[ClassPoint]:
    by_unit: dict = {}
    for (k, s, _), fold in zip(keys, values, strict=True):
        by_unit.setdefault((k, s), []).append(fold)
    points = []
    for (k, s), folds in by_unit.items():
        stacked = np.stack(folds)  # (folds, ridges, nodes)
        for (r, ridge), (p, m) in itertools.product(enumerate(grid.ridges), enumerate(grid.nodes)):
            fold_values = stacked[:, r, p]
            mean = float(fold_values.mean())
            points.append(ClassPoint(m, k, s, ridge, tuple(map(float, fold_values)), mean,
                                     float(fold_values.std(ddof=1)),
                                     1.0 - mean if scoring == "accuracy" else mean))
    return points

"""Constructive growth: add data-driven nodes in batches, keep a batch only if it pays.

Each fold draws one pool of candidate nodes from its own training rows (the same draw rule and seed
as everywhere else) and offers them in consecutive batches. A batch is kept when the mean
cross-validated score (as in :mod:`nodecast.trainer.grid`) falls by more than ``threshold`` (a
relative amount) and, under a precision budget, every fold model's estimated export error stays
within the tolerance; growth stops after ``patience`` rejected batches in a row or when the pool is
spent. Appending a batch updates each fold's thin QR factor of [1, H_kept] by block Gram-Schmidt
with one re-orthogonalisation, so no pass re-reads the kept columns. The final model draws the same
pool from all rows and keeps the same batches.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.trainer import solvers
from nodecast.trainer.cv_units import fold_network
from nodecast.trainer.folds import draw_layer, hidden_outputs, split_data
from nodecast.trainer.prefix_solve import prefix_solutions


@dataclass(frozen=True)
class GrowthSettings:
    """batch: nodes per batch; threshold: relative fall of the score a batch must bring; patience:
    rejected batches in a row before stopping; pool: candidate nodes drawn per fold."""

    batch: int = 25
    threshold: float = 0.002
    patience: int = 3
    pool: int = 1000


@dataclass(frozen=True)
class GrowthResult:
    """The curve (one record per offered batch), the kept batches and the grown model's record."""

    curve: tuple[dict, ...]
    kept_batches: tuple[int, ...]
    settings: GrowthSettings
    base: dict

    @property
    def nodes(self) -> int:
        return sum(1 for _ in self.kept_columns())

    def kept_columns(self):
        for b in self.kept_batches:
            yield from range(b * self.settings.batch, (b + 1) * self.settings.batch)

    def best(self) -> dict:
        kept = [record for record in self.curve if record["kept"]]
        return kept[-1] if kept else self.base

    def as_dict(self) -> dict:
        return {"batch": self.settings.batch, "threshold": self.settings.threshold,
                "patience": self.settings.patience, "pool": self.settings.pool,
                "kept_batches": list(self.kept_batches), "nodes": self.nodes,
                "start": self.base, "curve": list(self.curve), "final": self.best()}


class _FoldGrowth:
    """One fold's pool, its thin QR factor of [1, H_kept] and the validation activations."""

    def __init__(self, X, Y, split, declared, point, settings, pool: int):
        self.data = split_data(X, Y, split[0], split[1], *declared)
        self.activation, self.ridge = settings.activation, point.ridge
        self.layer = draw_layer(self.data.U_train, self.data.T_train, pool, settings.seed,
                                settings.activation, method=point.method, **point.layer.kwargs)
        n_rows = self.data.U_train.shape[0]
        self.Q = np.full((n_rows, 1), 1.0 / np.sqrt(n_rows))
        self.R = np.array([[np.sqrt(n_rows)]])
        self.qty = self.Q.T @ self.data.T_train
        self.columns: list[int] = []

    def baseline_error(self) -> np.ndarray:
        mean = self.data.T_train.mean(axis=0)
        predicted = self.data.output_offset + self.data.output_scale * mean
        return np.sqrt(np.mean((predicted - self.data.Y_valid) ** 2, axis=0))

    def propose(self, columns: list[int]):
        """The factor with ``columns`` appended; returns (Q, R, qty, beta, bias, rmse)."""
        B = hidden_outputs(_subset(self.layer, columns), self.data.U_train, self.activation)
        C = self.Q.T @ B
        B = B - self.Q @ C
        again = self.Q.T @ B  # re-orthogonalise once (CGS2)
        B -= self.Q @ again
        Q2, R2 = np.linalg.qr(B)
        p, b = self.R.shape[0], len(columns)
        R = np.block([[self.R, C + again], [np.zeros((b, p)), R2]])
        Q, qty = np.hstack([self.Q, Q2]), np.vstack([self.qty, Q2.T @ self.data.T_train])
        factor = solvers.QRFactor(R, qty, self.data.U_train.shape[0])
        ((beta, bias),) = prefix_solutions(factor, self.ridge, [R.shape[0] - 1])
        H_valid = hidden_outputs(_subset(self.layer, self.columns + columns), self.data.U_valid,
                                 self.activation)
        predicted = self.data.output_offset + self.data.output_scale * (H_valid @ beta + bias)
        rmse = np.sqrt(np.mean((predicted - self.data.Y_valid) ** 2, axis=0))
        return Q, R, qty, beta, bias, rmse

    def estimate(self, columns, beta, bias, precision, probes) -> float:
        layer = _subset(self.layer, self.columns + columns)
        net = fold_network(layer, len(layer.biases), beta, bias, self.data, self.activation)
        from nodecast.compiler.bounds.certificate import screening_bound

        return screening_bound(net, precision)

    def commit(self, columns, proposal) -> None:
        self.Q, self.R, self.qty = proposal[:3]
        self.columns = self.columns + columns


def _subset(layer, columns):
    from nodecast.trainer.generators import HiddenLayer

    return HiddenLayer(layer.weights[columns], layer.biases[columns])


def grow(X, Y, splits, declared, point, settings, growth: GrowthSettings, target_range,
         probes=None) -> GrowthResult:
    """Grow a network with the (k, s, ridge) of ``point`` (a GridPoint) fold by fold.

    X : ndarray (N, n); Y : ndarray (N, t); splits : the folds' (train, valid) rows; declared :
    (low, high), NaN where not declared; settings : SearchSettings; target_range : ndarray (t,).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):  # as in cv_units: one BLAS thread
        return _grow(X, Y, splits, declared, point, settings, growth, target_range, probes)


def _grow(X, Y, splits, declared, point, settings, growth, target_range, probes) -> GrowthResult:
    folds = [_FoldGrowth(X, Y, split, declared, point, settings, growth.pool) for split in splits]
    base = _record(-1, 0, np.array([f.baseline_error() for f in folds]), target_range, True)
    current, curve, kept, misses = base["score"], [], [], 0
    for index in range(growth.pool // growth.batch):
        if misses >= growth.patience:
            break
        columns = list(range(index * growth.batch, (index + 1) * growth.batch))
        proposals = [fold.propose(columns) for fold in folds]
        rmse = np.array([proposal[5] for proposal in proposals])
        estimate = _max_estimate(folds, columns, proposals, settings, probes)
        nodes = len(folds[0].columns) + len(columns)
        record = _record(index, nodes, rmse, target_range, False, estimate)
        within = estimate is None or estimate <= settings.tolerance
        if within and record["score"] < current * (1.0 - growth.threshold):
            record["kept"] = True
            for fold, proposal in zip(folds, proposals, strict=True):
                fold.commit(columns, proposal)
            current, misses = record["score"], 0
            kept.append(index)
        else:
            misses += 1
        curve.append(record)
    return GrowthResult(tuple(curve), tuple(kept), growth, base)


def _max_estimate(folds, columns, proposals, settings, probes):
    if settings.precision is None or settings.tolerance is None:
        return None
    return max(fold.estimate(columns, p[3], p[4], settings.precision, probes)
               for fold, p in zip(folds, proposals, strict=True))


def _record(index, nodes, fold_rmse, target_range, kept, estimate=None) -> dict:
    mean = fold_rmse.mean(axis=0)
    return {"batch": index, "nodes": nodes, "rmse_mean": [float(v) for v in mean],
            "rmse_std": [float(v) for v in fold_rmse.std(axis=0, ddof=1)],
            "score": float(np.mean(mean / target_range)), "estimate": estimate, "kept": kept}


def fit_grown(X, y, domain, point, settings, result: GrowthResult):
    """The grown model on all rows: the pool drawn with the same seed, the same batches kept.

    X : ndarray (N, n); y : ndarray (N,) or (N, t); domain : (low, high) of the final model.
    Returns a fitted RandomNodeRegressor whose ``n_nodes`` is the kept count.
    """
    from nodecast.compiler.errors import NodecastError
    from nodecast.trainer.estimators import RandomNodeRegressor

    columns = list(result.kept_columns())
    if not columns:
        raise NodecastError(f"growth kept no batch: no batch of {result.settings.batch} nodes "
                            f"lowered the CV error by more than {result.settings.threshold:g}; "
                            "lower the threshold or change the batch size")
    # A one-node fit sets the estimator's normalisation; its layer is then replaced by the kept one.
    model = RandomNodeRegressor(
        **{**point.params, "n_nodes": 1}, activation=settings.activation, domain=domain,
        random_state=settings.seed).fit(X, y)
    U = (X - model.input_offset_) / model.input_scale_
    T = (y.reshape(X.shape[0], -1) - model.output_offset_) / model.output_scale_
    pool = draw_layer(U, T, result.settings.pool, settings.seed, settings.activation,
                      method=point.method, **point.layer.kwargs)
    layer = _subset(pool, columns)
    factor = solvers.accumulate(
        (hidden_outputs(layer, U[i : i + 4096], settings.activation), T[i : i + 4096])
        for i in range(0, U.shape[0], 4096))
    model.coef_, model.intercept_ = solvers.solve(factor, point.ridge)
    model.hidden_weights_, model.hidden_biases_ = layer.weights, layer.biases
    model.diagnostics_ = dict(pool.diagnostics)
    model.set_params(n_nodes=len(columns))
    return model

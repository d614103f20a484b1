"""One unit of the search: one fold, one hidden layer (a generator and its hyper-parameters, for
example data-driven with neighbour count k and slope scale s).

A unit draws the hidden layer of max(M) nodes once from the fold's training rows, folds those rows
into one QR factor in a single pass, and scores every (ridge, M) pair on the fold's validation rows:
the first M nodes are the M-node model, and every M comes from one factorisation per ridge value
(:mod:`nodecast.trainer.prefix_solve`). The factor and the validation sums run over fixed row
blocks (:mod:`nodecast.trainer.unit_blocks`), as in the streamed and cluster searches. With a
target precision it also estimates each fold model's export error (the certified bound, coarsely
refined) over the declared domain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.trainer.folds import SplitData, draw_layer, split_data
from nodecast.trainer.method_grid import LayerSpec
from nodecast.trainer.unit_blocks import UnitFold, ValidationSums, solutions_of


@dataclass(frozen=True)
class UnitSettings:
    """What one unit needs besides the data: the layer it draws, the grid axes it covers and the
    shared settings."""

    layer: LayerSpec
    nodes: tuple[int, ...]
    ridges: tuple[float, ...]
    seed: int
    activation: str = "logistic"
    precision: str | None = None


@dataclass(frozen=True, eq=False)
class UnitScores:
    """rmse, max_abs : ndarray of shape (n_ridges, n_nodes, n_targets), target units, on the fold's
    validation rows. estimate : ndarray of shape (n_ridges, n_nodes) (max over outputs of the
    estimated export error, target units) or None without a precision.
    diagnostics : the generator's counts."""

    rmse: np.ndarray
    max_abs: np.ndarray
    estimate: np.ndarray | None
    diagnostics: dict


def evaluate_unit(X, Y, split, declared, settings: UnitSettings, probes=None) -> UnitScores:
    """Score one (fold, layer) unit, with single-threaded BLAS.

    One BLAS thread per unit keeps the arithmetic, and so every bit of the result, the same
    however many units run at once (``n_jobs``), and spares the small triangular kernels the
    thread contention that slows them by orders of magnitude on a busy machine; units run in
    parallel instead.

    X : ndarray of shape (N, n); Y : ndarray of shape (N, t); split : (train rows, valid rows);
    declared : (low, high) of shape (n,) each, NaN where not declared; probes : ndarray of shape
    (P, n), points of the declared domain for the export-error estimate (needed with a precision).
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _evaluate(X, Y, split, declared, settings, probes)


def _evaluate(X, Y, split, declared, settings: UnitSettings, probes) -> UnitScores:
    data = split_data(X, Y, split[0], split[1], *declared)
    layer = draw_layer(data.U_train, data.T_train, max(settings.nodes), settings.seed,
                       settings.activation, method=settings.layer.method,
                       **settings.layer.kwargs)
    activation = get_activation(settings.activation)
    fold = UnitFold(layer, activation, data.U_train.shape[0])
    fold.push(data.U_train, data.T_train)
    solutions = solutions_of(fold.factor, settings.ridges, settings.nodes)
    sums = ValidationSums(layer, activation, solutions, settings.nodes, data.U_valid.shape[0],
                          "rmse", (data.output_offset, data.output_scale), fold.shared)
    sums.push(data.U_valid, data.Y_valid)
    return unit_scores(sums, layer, solutions, data, settings, probes)


def unit_scores(sums: ValidationSums, layer, solutions, norm, settings: UnitSettings,
                probes) -> UnitScores:
    """The scores of a unit from its validation sums; with a precision, the estimated export
    error of every fold model (``norm``: the fold's box and scalings, as :class:`SplitData`)."""
    rmse, max_abs = sums.values()
    estimate = None
    if settings.precision:
        estimate = np.empty((len(settings.ridges), len(settings.nodes)))
        for r, row in enumerate(solutions):
            for p, (m, (beta, bias)) in enumerate(zip(settings.nodes, row, strict=True)):
                net = fold_network(layer, m, beta, bias, norm, settings.activation)
                estimate[r, p] = _estimate(net, settings.precision, probes)
    return UnitScores(rmse, max_abs, estimate, dict(layer.diagnostics))


def _estimate(net: Network, precision: str, probes) -> float:
    """The certified bound's max over outputs (coarse refinement, see
    :func:`nodecast.compiler.bounds.certificate.screening_bound`); infinity for a model the
    precision cannot represent (a fixed-point plan whose accumulators could overflow), which no
    tolerance accepts."""
    from nodecast.compiler.bounds.certificate import screening_bound

    try:
        return screening_bound(net, precision)
    except NodecastError:
        return float("inf")


def fold_network(layer, m: int, beta, bias, data: SplitData, activation: str) -> Network:
    """The IR of a fold's model with the first m nodes, for the export-error estimate."""
    n, t = data.input_offset.shape[0], beta.shape[1]
    return Network(
        hidden_weights=layer.weights[:m], hidden_biases=layer.biases[:m], activation=activation,
        output_weights=beta, output_bias=bias, input_offset=data.input_offset,
        input_scale=data.input_scale, output_offset=data.output_offset,
        output_scale=data.output_scale, domain_low=data.low, domain_high=data.high,
        feature_names=tuple(f"x{i}" for i in range(n)),
        target_names=tuple(f"y{i}" for i in range(t)))

"""One unit of the search: one fold, one hidden layer (a generator and its hyper-parameters, for
example data-driven with neighbour count k and slope scale s).

A unit draws the hidden layer of max(M) nodes once from the fold's training rows, folds those rows
into one QR factor in a single pass, and scores every (ridge, M) pair on the fold's validation rows:
the first M nodes are the M-node model, and every M comes from one factorisation per ridge value
(:mod:`nodecast.trainer.prefix_solve`). With a target precision it also estimates each fold model's
export error (the certified bound, coarsely refined) over the declared domain.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.trainer import solvers
from nodecast.trainer.folds import SplitData, draw_layer, hidden_outputs, split_data
from nodecast.trainer.method_grid import LayerSpec
from nodecast.trainer.prefix_solve import prefix_solutions

_BLOCK_ENTRIES = 2**23  # hidden-layer entries per block of rows (64 MiB of float64)


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
    factor = solvers.accumulate(_blocks(layer, data, settings.activation))
    H_valid = hidden_outputs(layer, data.U_valid, settings.activation)
    shape = (len(settings.ridges), len(settings.nodes))
    rmse = np.empty(shape + (Y.shape[1],))
    max_abs = np.empty_like(rmse)
    estimate = np.empty(shape) if settings.precision else None
    for r, ridge in enumerate(settings.ridges):
        solutions = prefix_solutions(factor, ridge, settings.nodes)
        for p, (m, (beta, bias)) in enumerate(zip(settings.nodes, solutions, strict=True)):
            predicted = data.output_offset + data.output_scale * (H_valid[:, :m] @ beta + bias)
            error = predicted - data.Y_valid
            rmse[r, p] = np.sqrt(np.mean(error**2, axis=0))
            max_abs[r, p] = np.max(np.abs(error), axis=0)
            if estimate is not None:
                net = fold_network(layer, m, beta, bias, data, settings.activation)
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


def _blocks(layer, data: SplitData, activation: str):
    rows = max(1, _BLOCK_ENTRIES // layer.weights.shape[0])
    for start in range(0, data.U_train.shape[0], rows):
        stop = start + rows
        yield hidden_outputs(layer, data.U_train[start:stop], activation), data.T_train[start:stop]


def fold_network(layer, m: int, beta, bias, data: SplitData, activation: str) -> Network:
    """The IR of a fold's model with the first m nodes, for the export-error estimate."""
    n, t = data.U_train.shape[1], beta.shape[1]
    return Network(
        hidden_weights=layer.weights[:m], hidden_biases=layer.biases[:m], activation=activation,
        output_weights=beta, output_bias=bias, input_offset=data.input_offset,
        input_scale=data.input_scale, output_offset=data.output_offset,
        output_scale=data.output_scale, domain_low=data.low, domain_high=data.high,
        feature_names=tuple(f"x{i}" for i in range(n)),
        target_names=tuple(f"y{i}" for i in range(t)))

"""Output weights for every prefix of the hidden nodes, from one factorisation per ridge value.

Input: the QR factor of the design [1, H] (:func:`nodecast.trainer.solvers.accumulate`), whose
trailing block R22 is the factor of the centred hidden layer. The first m nodes have the factor
R22[:m, :m] (the leading block of a triangular factor is the factor of the leading columns).

* ridge > 0: the ridge problem of m nodes is the least-squares problem of [R22_m; sqrt(ridge) I_m].
  Those are exactly the first m columns of [R22; sqrt(ridge) I] (R22 is upper triangular), so one
  triangular-pentagonal QR (LAPACK ``dtpqrt``, which keeps the structure and costs about a fifth
  of a dense QR of the stacked matrix) serves every m: its leading m x m block and the leading m
  entries of the rotated right-hand side give beta_m by one triangular solve.
* ridge = 0: the minimum-norm least-squares solution. While the triangular factor of the m nodes is
  clearly non-singular (LAPACK ``dtrcon`` estimate), that is the triangular solve itself; otherwise
  the SVD-based solver of :mod:`nodecast.trainer.solvers` (which discards singular values below
  machine precision) gives it.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from scipy.linalg import lapack

from nodecast.trainer import solvers

_BLOCK = 64  # inner block size of dtpqrt
_RCOND_MARGIN = 100.0  # triangular solve while rcond > margin * m * eps


def prefix_solutions(factor, ridge: float, prefixes) -> list[tuple[np.ndarray, np.ndarray]]:
    """Output weights of shape (m, t) and bias of shape (t,) for each m in ``prefixes``.

    factor : QRFactor of [1, H] with H of shape (N, M); prefixes : increasing node counts <= M.
    """
    R22 = np.ascontiguousarray(factor.R[1:, 1:])
    q2 = np.ascontiguousarray(factor.qty[1:])
    if ridge > 0:
        R, rotated = _ridge_factor(R22, q2, ridge)
        betas = [scipy.linalg.solve_triangular(R[:m, :m], rotated[:m], check_finite=False)
                 for m in prefixes]
    else:
        betas = [_minimum_norm(factor, R22, q2, m) for m in prefixes]
    return [(beta, _bias(factor, beta)) for beta in betas]


def _ridge_factor(R22: np.ndarray, q2: np.ndarray, ridge: float):
    """Triangular factor of [R22; sqrt(ridge) I] and the first M entries of Q^T [q2; 0]."""
    M = R22.shape[0]
    R, V, T, info = lapack.dtpqrt(M, min(_BLOCK, M), R22, np.sqrt(ridge) * np.eye(M))
    if info != 0:
        raise ValueError(f"LAPACK dtpqrt failed (info {info})")
    rotated, _, info = lapack.dtpmqrt(M, V, T, q2.copy(), np.zeros_like(q2), side="L", trans="T")
    if info != 0:
        raise ValueError(f"LAPACK dtpmqrt failed (info {info})")
    return np.triu(R), rotated


def _minimum_norm(factor, R22: np.ndarray, q2: np.ndarray, m: int) -> np.ndarray:
    block = R22[:m, :m]
    rcond, info = lapack.dtrcon(block, norm="1")
    if info == 0 and rcond > _RCOND_MARGIN * m * np.finfo(float).eps:
        return scipy.linalg.solve_triangular(block, q2[:m], check_finite=False)
    beta, _ = solvers.solve(factor, 0.0, n_nodes=m)
    return beta


def _bias(factor, beta: np.ndarray) -> np.ndarray:
    m = beta.shape[0]
    return (factor.qty[0] - factor.R[0, 1 : m + 1] @ beta) / factor.R[0, 0]

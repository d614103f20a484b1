"""Output-layer solvers that never form H^T H.

The output layer minimises ||H beta + 1 c^T - Y||^2 + ridge ||beta||^2 with the bias c not penalised.
Rows arrive in blocks; a blocked QR keeps only the triangular factor R of [1, H] and Q^T Y, so memory
does not grow with the number of rows and the condition number is not squared. With the ones column
first, the bias eliminates exactly: beta solves the trailing problem min ||R22 beta - q2||^2 +
ridge ||beta||^2, then c = (q1 - R12 beta) / R11. The leading block of R22 is the factor of the first
m columns of H, so every prefix of the nodes is solved from the same factor.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg


@dataclass(frozen=True, eq=False)
class QRFactor:
    """R of shape (M + 1, M + 1) and Q^T Y of shape (M + 1, t) for the design [1, H]."""

    R: np.ndarray
    qty: np.ndarray
    n_rows: int


def accumulate(blocks) -> QRFactor:
    """Fold (H_block, Y_block) pairs into one QR factor, in float64."""
    R = qty = None
    n_rows = 0
    for H, Y in blocks:
        design = np.hstack([np.ones((H.shape[0], 1)), np.asarray(H, dtype=np.float64)])
        Y = np.asarray(Y, dtype=np.float64).reshape(H.shape[0], -1)
        if R is not None:
            design, Y = np.vstack([R, design]), np.vstack([qty, Y])
        Q, R = scipy.linalg.qr(design, mode="economic", overwrite_a=True, check_finite=False)
        qty = Q.T @ Y
        n_rows += H.shape[0]
    if R is None:
        raise ValueError("no rows to fit")
    p = R.shape[1]
    if R.shape[0] < p:  # fewer rows than unknowns: pad the factor with zero rows
        R = np.vstack([R, np.zeros((p - R.shape[0], p))])
        qty = np.vstack([qty, np.zeros((p - qty.shape[0], qty.shape[1]))])
    return QRFactor(R, qty, n_rows)


def _trailing_minimum_norm(R22: np.ndarray, q2: np.ndarray) -> np.ndarray:
    # SVD-based least squares of the triangular factor: the singular values are those of H itself.
    beta, *_ = scipy.linalg.lstsq(R22, q2, lapack_driver="gelsd", check_finite=False)
    return beta


def _trailing_ridge(R22: np.ndarray, q2: np.ndarray, ridge: float) -> np.ndarray:
    m = R22.shape[0]
    stacked = np.vstack([R22, np.sqrt(ridge) * np.eye(m)])
    rhs = np.vstack([q2, np.zeros((m, q2.shape[1]))])
    Q, R = scipy.linalg.qr(stacked, mode="economic", check_finite=False)
    return scipy.linalg.solve_triangular(R, Q.T @ rhs, check_finite=False)


def solve(factor: QRFactor, ridge: float, n_nodes: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Output weights (m, t) and bias (t,) for the first ``n_nodes`` nodes (all by default).

    ``ridge = 0`` gives the minimum-norm least-squares solution (Moore-Penrose), stable when H is
    rank-deficient; ``ridge > 0`` the ridge solution by a second QR, never by normal equations.
    """
    if not np.isfinite(ridge) or ridge < 0:
        raise ValueError(f"ridge must be a finite number >= 0, got {ridge!r}")
    m = factor.R.shape[0] - 1 if n_nodes is None else n_nodes
    R22, q2 = factor.R[1 : m + 1, 1 : m + 1], factor.qty[1 : m + 1]
    beta = _trailing_ridge(R22, q2, ridge) if ridge > 0 else _trailing_minimum_norm(R22, q2)
    r11 = factor.R[0, 0]
    bias = (factor.qty[0] - factor.R[0, 1 : m + 1] @ beta) / r11
    return beta, bias

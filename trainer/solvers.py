"""Output-layer solvers that never form H^T H of the raw design.

The output layer minimises ||H beta + 1 c^T - Y||^2 + ridge ||beta||^2 with the bias c not penalised.
Rows arrive in blocks; only the triangular factor R of the design D = [1, H] (shape (M + 1, M + 1))
and Q^T Y are kept, so memory does not grow with the number of rows, and everything is float64.

Accumulating a block D_k onto the factor R of the rows before it, in one of two exact ways:

* a preconditioned Cholesky update: W = D_k R^-1 (a backward-stable triangular solve), then
  [R; D_k] = [I; W] R and the factor of [I; W] is the Cholesky factor C of I + W^T W. Its smallest
  eigenvalue is at least 1, so the Cholesky step is well conditioned whatever the condition of H;
  the new factor is C R and Q^T Y becomes C^-T (Q^T Y + W^T Y_k). The rounding errors act as a
  backward error of about eps (1 + ||W||^2) on the data, so the update is taken only while
  ||W||^2 stays below ``UPDATE_LIMIT`` (rows like the ones already seen, which is the usual case
  after the first block): Gershgorin's bound decides where it can, else a Cholesky test of
  UPDATE_LIMIT I - W^T W (:func:`_below_limit`). It costs about two Gram matrices of the block.
* otherwise (the first block, rows unlike any before, a singular factor) a Householder QR of the
  stacked [R, Q^T Y; D_k, Y_k] (LAPACK ``dgeqrt``), the textbook stable method.

Neither squares the condition number of H, so lambda = 0 and tiny lambda stay honest. With the ones
column first the bias eliminates exactly: beta solves min ||R22 beta - q2||^2 + ridge ||beta||^2 and
c = (q1 - R12 beta) / R11. The leading block of R22 is the factor of the first m columns of H, so
every prefix of the nodes is solved from the same factor.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg
from scipy.linalg import blas, lapack

_CONTROLLER = []  # the threadpoolctl controller, made on first use (after numpy and scipy load)
UPDATE_LIMIT = 64.0  # largest accepted bound on ||W||_2^2 of a Cholesky update (see above)
_PANEL = 32  # dgeqrt panel width: the fastest measured for a few hundred columns


@dataclass(frozen=True, eq=False)
class QRFactor:
    """R of shape (M + 1, M + 1) and Q^T Y of shape (M + 1, t) for the design [1, H]; ``y_squares``
    (shape (t,)) the sums of the squared targets, for residual sums (None where unknown)."""

    R: np.ndarray
    qty: np.ndarray
    n_rows: int
    y_squares: np.ndarray | None = None


def accumulate(blocks) -> QRFactor:
    """Fold (H_block, Y_block) pairs into one factor, in float64.

    blocks : iterable of (ndarray of shape (rows, M), ndarray of shape (rows,) or (rows, t)).
    """
    return accumulate_designs(_with_ones(blocks))


def _with_ones(blocks):
    buffer = None
    for H, Y in blocks:
        H = np.asarray(H, dtype=np.float64)
        if buffer is None or buffer.shape[0] < H.shape[0] or buffer.shape[1] != H.shape[1] + 1:
            buffer = np.empty((H.shape[0], H.shape[1] + 1))
        design = buffer[: H.shape[0]]
        design[:, 0], design[:, 1:] = 1.0, H
        yield design, Y


def accumulate_designs(blocks, start: QRFactor | None = None) -> QRFactor:
    """:func:`accumulate` for blocks (D, Y) whose design D = [1, H] of shape (rows, M + 1), C order,
    already holds the ones column; from ``start`` (the factor of earlier rows, not modified) if
    given."""
    R = qty = scratch = y_squares = None
    n_rows = 0
    if start is not None:
        R, qty, n_rows, y_squares = start.R, start.qty, start.n_rows, start.y_squares
    for design, Y in blocks:
        if design.shape[0] == 0:
            continue
        Y = np.asarray(Y, dtype=np.float64).reshape(design.shape[0], -1)
        squares = np.einsum("ij,ij->j", Y, Y)
        y_squares = squares if y_squares is None else y_squares + squares
        update = None
        if R is not None:
            if scratch is None or scratch.shape[0] < design.shape[0]:
                scratch = np.empty(design.shape)
            update = _cholesky_update(R, qty, design, Y, scratch[: design.shape[0]])
        R, qty = update if update is not None else _householder_update(R, qty, design, Y)
        n_rows += design.shape[0]
    if R is None:
        raise ValueError("no rows to fit")
    return QRFactor(np.ascontiguousarray(R), qty, n_rows, y_squares)


def single_blas_thread():
    """A context in which BLAS runs on one thread. OpenBLAS's threaded Cholesky, QR and SVD of a
    few hundred columns were measured many times slower than its single-threaded ones on a busy
    two-core machine; the large products of a fit keep their threads."""
    if not _CONTROLLER:
        from threadpoolctl import ThreadpoolController

        _CONTROLLER.append(ThreadpoolController())
    return _CONTROLLER[0].limit(limits=1, user_api="blas")


def _cholesky_update(R, qty, design, Y, scratch):
    """The factor of [R; design] by the preconditioned Cholesky update, or None where refused.

    scratch : ndarray of the shape of ``design`` (C order), overwritten with W = design R^-1.
    """
    np.copyto(scratch, design)
    W_T = blas.dtrsm(1.0, R, scratch.T, side=0, lower=0, trans_a=1, overwrite_b=1)
    gram = blas.dsyrk(1.0, W_T)  # upper triangle of W^T W, zeros below: all LAPACK reads here
    magnitudes = np.abs(gram)  # Gershgorin: ||W||_2^2 <= the largest absolute row sum of W^T W,
    # row i of the symmetric matrix being row i of the upper triangle and column i above it
    bound = np.max(magnitudes.sum(axis=1) + magnitudes.sum(axis=0) - np.diagonal(magnitudes))
    if not bound <= UPDATE_LIMIT and not _below_limit(gram):  # also refuses NaN from a singular R
        return None
    gram[np.diag_indices_from(gram)] += 1.0
    rotated_y = qty + blas.dgemm(1.0, W_T, Y)
    with single_blas_thread():
        C, info = lapack.dpotrf(gram, lower=0, clean=1, overwrite_a=1)
        if info != 0:
            return None
        new_qty = scipy.linalg.solve_triangular(C, rotated_y, trans="T", check_finite=False)
        return blas.dtrmm(1.0, C, R, side=0, lower=0), new_qty


def _below_limit(gram) -> bool:
    """Whether ||W||_2^2 = the largest eigenvalue of W^T W (gram: its upper triangle) is below
    ``UPDATE_LIMIT``, where Gershgorin's bound could not tell: exactly when UPDATE_LIMIT I - W^T W
    is positive definite, which its Cholesky factorisation decides (a backward-stable test: it
    succeeds only for a matrix within rounding of a positive definite one). One M^3 / 3 step,
    against the Householder QR of M + rows rows that a refusal costs (measured at M = 2000:
    Gershgorin refused blocks of 3,200 rows whose ||W||^2 was below the limit)."""
    if not np.all(np.isfinite(gram)):
        return False
    test = -gram
    test[np.diag_indices_from(test)] += UPDATE_LIMIT
    with single_blas_thread():
        _, info = lapack.dpotrf(test, lower=0, clean=0, overwrite_a=1)
    return info == 0


def _householder_update(R, qty, design, Y):
    """The factor of [R, qty; design, Y] by Householder QR (R None: of [design, Y] alone)."""
    p, t = design.shape[1], Y.shape[1]
    top = 0 if R is None else p
    stacked = np.empty((top + design.shape[0], p + t), order="F")
    if R is not None:
        stacked[:p, :p], stacked[:p, p:] = R, qty
    stacked[top:, :p], stacked[top:, p:] = design, Y
    panel = max(1, min(_PANEL, *stacked.shape))
    with single_blas_thread():
        reduced, _, info = lapack.dgeqrt(panel, stacked, overwrite_a=1)
    if info != 0:
        raise ValueError(f"LAPACK dgeqrt failed (info {info})")
    k = min(reduced.shape[0], p)
    factor = np.zeros((p, p + t))
    factor[:k] = np.triu(reduced[:k])
    return np.asfortranarray(factor[:, :p]), np.ascontiguousarray(factor[:, p:])


def _trailing_minimum_norm(R22: np.ndarray, q2: np.ndarray, n_rows: int) -> np.ndarray:
    # SVD-based least squares of the triangular factor: its singular values are those of the
    # centred H. Values below eps * max(N, M + 1) times the largest count as zero, the numerical
    # rank rule of numpy.linalg.lstsq and pinv (common practice): below it a singular value is
    # rounding noise of the factor, and keeping it would give a weight of rounding noise / noise.
    cutoff = np.finfo(np.float64).eps * max(n_rows, R22.shape[0] + 1)
    beta, *_ = scipy.linalg.lstsq(R22, q2, cond=cutoff, lapack_driver="gelsd", check_finite=False)
    return beta


def _trailing_ridge(R22: np.ndarray, q2: np.ndarray, ridge: float) -> np.ndarray:
    # Ridge as the least-squares problem of [R22; sqrt(ridge) I]: a QR, never normal equations.
    # The right-hand side rides along in the QR (Q^T [q2; 0] without an explicit Q: measured 2.1x
    # faster at M = 1000 than forming Q).
    m = R22.shape[0]
    R, rotated = _householder_update(R22, q2, np.sqrt(ridge) * np.eye(m), np.zeros((m, q2.shape[1])))
    return scipy.linalg.solve_triangular(R, rotated, check_finite=False)


def solve(factor: QRFactor, ridge: float, n_nodes: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Output weights of shape (m, t) and bias of shape (t,) for the first ``n_nodes`` nodes (all
    by default).

    ``ridge = 0`` gives the minimum-norm least-squares solution (Moore-Penrose, numerical rank by
    numpy's rule eps * max(N, M + 1)), stable when H is rank-deficient; ``ridge > 0`` the ridge
    solution by a second QR, never by normal equations.
    """
    if not np.isfinite(ridge) or ridge < 0:
        raise ValueError(f"ridge must be a finite number >= 0, got {ridge!r}")
    m = factor.R.shape[0] - 1 if n_nodes is None else n_nodes
    R22, q2 = factor.R[1 : m + 1, 1 : m + 1], factor.qty[1 : m + 1]
    with single_blas_thread():
        beta = (_trailing_ridge(R22, q2, ridge) if ridge > 0
                else _trailing_minimum_norm(R22, q2, factor.n_rows))
    bias = (factor.qty[0] - factor.R[0, 1 : m + 1] @ beta) / factor.R[0, 0]
    return beta, bias

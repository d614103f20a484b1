"""The default ridge: generalized cross-validation checked on held-out rows, then guarded by the
float32 export error.

Rule (``ridge="auto"``, the default of the estimators and of ``nodecast train``):

1. For every lambda of ``GRID`` (10^-8 .. 10^2 in half decades, normalised coordinates) the
   generalized cross-validation score GCV(lambda) = (RSS(lambda) / N) / (1 - df(lambda) / N)^2
   (Golub, Heath and Wahba 1979), an estimate of the leave-one-out mean squared error that costs
   one SVD of the M x M factor R22 = U S V^T: with g = U^T q2,
   RSS(lambda) = RSS_outside + sum_i (lambda / (s_i^2 + lambda))^2 g_i^2 and
   df(lambda) = 1 + sum_i s_i^2 / (s_i^2 + lambda) (the 1 is the unpenalised bias).
2. The held-out check: the model of every lambda is also fitted to the rows outside a seeded check
   set (about a fifth of the rows, at most about ``CHECK_ROWS``, chosen by a hash of each row's
   inputs so that equal rows stay together: :class:`CheckRows`; the factor of those rows is a by-
   product of the fit's own pass) and scored on the check rows. GCV assumes that leaving a row out
   is like meeting a new one; duplicated rows, clustered rows and heavy-tailed inputs (a few rows
   of high leverage) break that, and GCV then picks a ridge far too small (measured: training RMSE
   0.57, test RMSE 3.28). The GCV minimum stands if its held-out error is within noise of the best
   held-out error; otherwise the held-out minimum replaces it. "Within noise": the mean over check
   rows of the paired difference of squared errors is at most one standard error of that mean (the
   one-standard-error rule, common practice).
3. From there, up the grid, the largest lambda reached before one falls out of noise of the best
   held-out error (prefer the larger, safer ridge when the data cannot tell them apart).
4. From there upwards, the first lambda whose certified float32 export error (the default C
   artifact's, from a coarse refinement:
   :func:`nodecast.compiler.bounds.certificate.screening_bound`) is at most ``FLOAT32_SHARE`` of
   the model's own GCV error estimate sqrt(GCV) is taken, so that the float32 artifact of a
   default model is proven within the default accuracy budget of verify (5% of the validation
   RMSE).

With fewer than ``MIN_CHECK_ROWS`` check rows (small data) step 2-3 are skipped (rule
"gcv+float32"). No step squares the condition number: the SVDs are of triangular factors.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from nodecast.trainer.solvers import single_blas_thread

GRID = 10.0 ** np.arange(-8.0, 2.01, 0.5)
FLOAT32_SHARE = 0.03
CHECK_FRACTION = 0.2  # share of the rows held out for the check
CHECK_ROWS = 20_000  # at most this many check rows (their hidden outputs are kept in memory)
MIN_CHECK_ROWS = 20  # fewer check rows than this: GCV alone


@dataclass(frozen=True)
class CheckRows:
    """Which rows the held-out check holds out: a row is a check row when a hash of its normalised
    inputs (:func:`nodecast.trainer.row_hash.content_hash`) under ``key`` falls below ``fraction``.
    Rows with equal inputs hash alike and go to the same side (a copy of a check row among the
    fitted rows would make the check as blind to duplicates as GCV is), and the choice of a row
    depends on the row alone: the same rows in memory, chunk by chunk and on a cluster."""

    key: int
    fraction: float

    def mask(self, U: np.ndarray) -> np.ndarray:
        """Boolean mask of shape (rows,): which rows of U (normalised inputs) are check rows."""
        from nodecast.trainer.row_hash import below, content_hash

        return below(content_hash(U, self.key), self.fraction)


def enough_rows(n_rows: int, fraction: float = CHECK_FRACTION) -> bool:
    """Whether ``n_rows`` rows are enough for a check set of ``fraction`` of them (at least
    ``MIN_CHECK_ROWS`` intended check rows); decided before any draw."""
    return min(int(fraction * n_rows), CHECK_ROWS) >= MIN_CHECK_ROWS


def check_plan(n_rows: int, rng: np.random.RandomState, fraction: float = CHECK_FRACTION) -> CheckRows:
    """The check's hash key (drawn from ``rng``) and fraction: ``fraction`` of the rows, at most
    ``CHECK_ROWS`` (about: each distinct row is drawn on its own)."""
    key = int(rng.randint(2**62, dtype=np.int64))
    return CheckRows(key, min(fraction, CHECK_ROWS / n_rows))


def check_usable(n_check: int, n_rows: int, fraction: float = CHECK_FRACTION) -> bool:
    """Whether a check set of ``n_check`` of ``n_rows`` rows is used: at least ``MIN_CHECK_ROWS``,
    leaving at least 2 rows to fit, and at most twice the intended count (a large group of equal
    rows drawn into it would hold out much of the data: GCV alone then)."""
    intended = min(fraction * n_rows, CHECK_ROWS)
    return MIN_CHECK_ROWS <= n_check < n_rows - 1 and n_check <= 2 * intended


def check_rows(U: np.ndarray, rng: np.random.RandomState,
               fraction: float = CHECK_FRACTION) -> CheckRows | None:
    """The check rows of normalised inputs U (rows, n) in memory, or None where too few rows (or
    too many, see :func:`check_usable`) fall in it."""
    if not enough_rows(U.shape[0], fraction):
        return None
    plan = check_plan(U.shape[0], rng, fraction)
    return plan if check_usable(int(plan.mask(U).sum()), U.shape[0], fraction) else None


@dataclass(frozen=True, eq=False)
class HeldOut:
    """The factor of the rows outside the check set, and the check rows' design [1, H] of shape
    (n_check, M + 1) with their targets of shape (n_check, t)."""

    factor: object
    design: np.ndarray
    targets: np.ndarray


@dataclass(frozen=True, eq=False)
class RidgeSpectrum:
    """Singular values s of R22 (shape (M,)), g = U^T q2 (shape (M, t)), the residual sum of squares
    outside the span of [1, H] per output (shape (t,)), and the number of rows."""

    singular_values: np.ndarray
    rotated: np.ndarray
    outside: np.ndarray
    n_rows: int


def spectrum(factor) -> RidgeSpectrum:
    """The pieces of GCV from a :class:`~nodecast.trainer.solvers.QRFactor` with ``y_squares``."""
    if factor.y_squares is None:
        raise ValueError("the ridge choice needs the factor's sums of squared targets")
    with single_blas_thread():
        left, s, _ = scipy.linalg.svd(factor.R[1:, 1:], lapack_driver="gesdd", check_finite=False)
    outside = np.maximum(factor.y_squares - np.sum(factor.qty**2, axis=0), 0.0)
    return RidgeSpectrum(s, left.T @ factor.qty[1:], outside, factor.n_rows)


def gcv_score(spec: RidgeSpectrum, ridge: float) -> float:
    """GCV(lambda) summed over the outputs (normalised units squared); inf where df >= N."""
    s2 = spec.singular_values**2
    shrink = ridge / (s2 + ridge) if ridge > 0 else (s2 == 0).astype(float)
    rss = spec.outside + np.sum((shrink[:, None] * spec.rotated) ** 2, axis=0)
    df = 1.0 + np.sum(1.0 - shrink)
    if df >= spec.n_rows:
        return float("inf")
    return float(np.sum(rss) / spec.n_rows / (1.0 - df / spec.n_rows) ** 2)


def heldout_squared_errors(check: HeldOut) -> np.ndarray:
    """Squared errors summed over outputs, shape (len(GRID), n_check), of the model of every
    lambda fitted to the rows outside the check set."""
    factor = check.factor
    with single_blas_thread():
        left, s, right_t = scipy.linalg.svd(factor.R[1:, 1:], lapack_driver="gesdd",
                                            check_finite=False)
    rotated = left.T @ factor.qty[1:]  # (M, t)
    # prediction = (H - 1 r12 / R11) beta + q1 / R11, beta = V diag(s / (s^2 + lambda)) g: the
    # betas of all the grid's lambdas side by side, then one product with the check rows (n_check
    # M t G numbers instead of n_check M^2 for a rotation of the rows, where t G < M)
    centred = check.design[:, 1:] - factor.R[0, 1:] / factor.R[0, 0]
    offset = factor.qty[0] / factor.R[0, 0]
    t = rotated.shape[1]
    betas = np.concatenate([right_t.T @ ((s / (s**2 + ridge))[:, None] * rotated) for ridge in GRID],
                           axis=1)  # (M, G t)
    predicted = (centred @ betas).reshape(-1, GRID.size, t) + offset
    errors = np.sum((predicted - check.targets[:, None, :]) ** 2, axis=2)
    return np.ascontiguousarray(errors.T)


def _within_noise(errors: np.ndarray, best: int) -> np.ndarray:
    """Per grid index: is the mean paired difference to the best at most its standard error?"""
    difference = errors - errors[best]
    n = errors.shape[1]
    return difference.mean(axis=1) <= difference.std(axis=1, ddof=1) / np.sqrt(n)


def checked_start(scores: np.ndarray, check: HeldOut | None) -> tuple[int, dict]:
    """Grid index of steps 1-3 of the module's rule, and the record of the check."""
    best_gcv = int(np.argmin(scores))
    if check is None:
        return best_gcv, {"rule": "gcv+float32"}
    errors = heldout_squared_errors(check)
    best = int(np.argmin(errors.mean(axis=1)))
    within = _within_noise(errors, best)
    index = best_gcv if within[best_gcv] else best
    while index + 1 < GRID.size and within[index + 1]:
        index += 1
    return index, {"rule": "gcv+heldout+float32", "heldout_minimum": float(GRID[best]),
                   "gcv_within_noise": bool(within[best_gcv]),
                   "check_rows": int(errors.shape[1])}


def choose(factor, export_error, check: HeldOut | None = None) -> tuple[float, dict]:
    """The ridge by the module's rule, and a record of the choice for the bundle's metadata.

    export_error : callable(ridge) -> the estimated float32 export error of the model solved with
    that ridge, max over outputs, in normalised target units.
    check : the held-out check's data, or None for GCV alone.
    """
    spec = spectrum(factor)
    scores = np.array([gcv_score(spec, ridge) for ridge in GRID])
    start, record = checked_start(scores, check)
    per_output_rmse = np.sqrt(scores / spec.rotated.shape[1])
    for index in range(start, GRID.size):
        error = export_error(float(GRID[index]))
        if error <= FLOAT32_SHARE * per_output_rmse[index] or index == GRID.size - 1:
            break
    record.update({"value": float(GRID[index]), "gcv_minimum": float(GRID[int(np.argmin(scores))]),
                   "gcv_rmse_normalised": float(per_output_rmse[index]),
                   "float32_bound_normalised": float(error)})
    return float(GRID[index]), record


def heldout_figures(check: HeldOut, ridge: float, output_scale: np.ndarray, classify: bool) -> dict:
    """The figures of the model of ``ridge`` fitted to the rows outside the check set, on the check
    rows: for regression the RMSE and largest error per output in target units, for
    classification the accuracy (the highest score's class, ties to the first); and the rows."""
    from nodecast.trainer import solvers

    beta, bias = solvers.solve(check.factor, ridge)
    predicted = check.design[:, 1:] @ beta + bias
    rows = int(predicted.shape[0])
    if classify:
        right = np.argmax(predicted, axis=1) == np.argmax(check.targets, axis=1)
        return {"accuracy": float(np.mean(right)), "rows": rows}
    error = (predicted - check.targets) * output_scale
    return {"rmse": [float(v) for v in np.sqrt(np.mean(error**2, axis=0))],
            "max_abs_error": [float(v) for v in np.max(np.abs(error), axis=0)], "rows": rows}

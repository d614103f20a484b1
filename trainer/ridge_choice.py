"""The default ridge: generalized cross-validation on a grid, guarded by the float32 export error.

Rule (``ridge="auto"``, the default of the estimators and of ``nodecast train``):

1. For every lambda of ``GRID`` (10^-8 .. 10^2 in half decades, normalised coordinates) the
   generalized cross-validation score GCV(lambda) = (RSS(lambda) / N) / (1 - df(lambda) / N)^2
   (Golub, Heath and Wahba 1979), an estimate of the leave-one-out mean squared error that costs
   one SVD of the M x M factor R22 = U S V^T: with g = U^T q2,
   RSS(lambda) = RSS_outside + sum_i (lambda / (s_i^2 + lambda))^2 g_i^2 and
   df(lambda) = 1 + sum_i s_i^2 / (s_i^2 + lambda) (the 1 is the unpenalised bias).
2. Starting at the GCV minimum, the first lambda (going up the grid) whose certified float32
   export error (the default C artifact's, from a coarse refinement:
   :func:`nodecast.compiler.bounds.certificate.screening_bound`) is at most ``FLOAT32_SHARE`` of
   the model's own GCV error estimate sqrt(GCV) is taken, so that the float32 artifact of a default model is
   proven within the default accuracy budget of verify (5% of the validation RMSE).

Neither step squares the condition number: the SVD is of the triangular factor.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from nodecast.trainer.solvers import single_blas_thread

GRID = 10.0 ** np.arange(-8.0, 2.01, 0.5)
FLOAT32_SHARE = 0.03


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


def choose(factor, export_error) -> tuple[float, dict]:
    """The ridge by the module's rule, and a record of the choice for the bundle's metadata.

    export_error : callable(ridge) -> the estimated float32 export error of the model solved with
    that ridge, max over outputs, in normalised target units.
    """
    spec = spectrum(factor)
    scores = np.array([gcv_score(spec, ridge) for ridge in GRID])
    best = int(np.argmin(scores))
    per_output_rmse = np.sqrt(scores / spec.rotated.shape[1])
    for index in range(best, GRID.size):
        error = export_error(float(GRID[index]))
        if error <= FLOAT32_SHARE * per_output_rmse[index] or index == GRID.size - 1:
            break
    record = {"rule": "gcv+float32", "value": float(GRID[index]), "gcv_minimum": float(GRID[best]),
              "gcv_rmse_normalised": float(per_output_rmse[index]),
              "float32_bound_normalised": float(error)}
    return float(GRID[index]), record

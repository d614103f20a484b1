"""Exact ranges over boxes of the input domain.

Every pre-activation is affine in the inputs, z_j(x) = b_j + sum_i A_ji x_i, so over a box
[low, high] its range is exactly centre +- radius with centre = z_j(box centre) and
radius = sum_i |A_ji| (high_i - low_i) / 2. The arithmetic here is float64; each radius is widened
by a bound on that arithmetic's own rounding (Higham's gamma_k on the sums of absolute values), so
the returned interval contains the exact real range.

Products are formed with ``numpy.einsum`` (no BLAS), so the result does not depend on the number
of BLAS threads.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.ir import Network

FLOAT64_UNIT = 2.0**-53


def gamma(k, unit: float) -> np.ndarray:
    """Higham's gamma_k = k u / (1 - k u): the relative error of k chained roundings."""
    k = np.asarray(k, dtype=np.float64)
    if np.any(k * unit >= 0.5):
        raise ValueError("too many roundings for a first-order bound at this unit roundoff")
    return k * unit / (1.0 - k * unit)


def matvec(rows: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """rows (B, n) times matrix.T (M, n) -> (B, M), without BLAS (reproducible bit for bit)."""
    return np.einsum("bn,mn->bm", rows, matrix)


def affine_ranges(weights: np.ndarray, biases: np.ndarray, low: np.ndarray, high: np.ndarray):
    """Exact ranges of ``weights @ x + biases`` over boxes.

    Parameters
    ----------
    weights : ndarray of shape (M, n); biases : ndarray of shape (M,)
    low, high : ndarray of shape (B, n), the corners of B boxes.

    Returns
    -------
    (lo, hi) : ndarrays of shape (B, M) that contain the real range of every affine function.
    """
    low, high = np.atleast_2d(low), np.atleast_2d(high)
    centre, half = 0.5 * (low + high), 0.5 * (high - low)
    mid = matvec(centre, weights) + biases
    radius = matvec(half, np.abs(weights))
    size = matvec(np.abs(centre), np.abs(weights)) + np.abs(biases) + radius
    slack = gamma(weights.shape[1] + 3, FLOAT64_UNIT) * size
    return mid - radius - slack, mid + radius + slack


def normalised_box(net: Network, low: np.ndarray, high: np.ndarray):
    """The boxes of normalised inputs u = (x - offset) / scale that contain the boxes of x."""
    lo = (np.atleast_2d(low) - net.input_offset) / net.input_scale
    hi = (np.atleast_2d(high) - net.input_offset) / net.input_scale
    pad = 4 * FLOAT64_UNIT * np.maximum(np.abs(lo), np.abs(hi))
    return lo - pad, hi + pad


def preactivation_ranges(net: Network, low=None, high=None):
    """Ranges (lo, hi) of every node's pre-activation over boxes of raw inputs.

    ``low``/``high`` are ndarrays of shape (n,) or (B, n); by default the declared domain. Returns
    ndarrays of shape (M,) for one box, (B, M) for several.
    """
    single = low is None or np.ndim(low) == 1
    low = net.domain_low if low is None else np.asarray(low, dtype=np.float64)
    high = net.domain_high if high is None else np.asarray(high, dtype=np.float64)
    u_low, u_high = normalised_box(net, low, high)
    lo, hi = affine_ranges(net.hidden_weights, net.hidden_biases, u_low, u_high)
    return (lo[0], hi[0]) if single else (lo, hi)

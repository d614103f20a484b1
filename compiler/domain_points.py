"""Deterministic points of a network's declared domain, shared by the typical error estimate, the
fixed-point plan's output range and verify's probe families."""

from __future__ import annotations

import numpy as np

from nodecast.compiler.ir import Network

MAX_CORNERS = 1024
ALL_CORNERS_UP_TO = 10


def unit_corners(n: int, seed: int) -> np.ndarray:
    """All 2^n corners of the unit box for n <= ALL_CORNERS_UP_TO, else MAX_CORNERS seeded random
    ones."""
    if n <= ALL_CORNERS_UP_TO:
        return np.array(np.meshgrid(*[[0, 1]] * n, indexing="ij")).reshape(n, -1).T
    return np.random.default_rng([seed, 1]).integers(0, 2, size=(MAX_CORNERS, n))


def corners(net: Network, seed: int) -> np.ndarray:
    """The domain's corners (:func:`unit_corners`)."""
    return np.where(unit_corners(net.n_features, seed) == 1, net.domain_high, net.domain_low)


def sobol(net: Network, count: int, seed: int) -> np.ndarray:
    """The first ``count`` points of a scrambled Sobol sequence of 2^m >= count points (drawing a
    power of two keeps the sequence's balance and SciPy's warning quiet), mapped onto the box."""
    from nodecast.compiler.sobol import sobol as sobol_points  # scipy's sequence, 0.6 s faster

    return net.domain_low + sobol_points(net.n_features, count, seed) * (net.domain_high - net.domain_low)


def domain_probes(net: Network, count: int = 2048, seed: int = 0) -> np.ndarray:
    """Deterministic points of the declared domain for the typical error estimate, the
    fixed-point plan's output range and the input-folding decision: scrambled Sobol points and
    corners (beyond ALL_CORNERS_UP_TO features, a sample drawn from ``seed`` itself, not from
    verify's stream), all mapped as ``low + unit (high - low)``, with categorical levels cycled
    through them. These are the points those decisions were always made on; changing them would
    change artifacts."""
    from nodecast.compiler.sobol import sobol as sobol_points  # scipy's sequence, 0.6 s faster

    n = net.n_features
    if n <= ALL_CORNERS_UP_TO:
        corner_bits = unit_corners(n, seed).astype(float)
    else:
        corner_bits = np.random.default_rng(seed).integers(0, 2, size=(MAX_CORNERS, n)).astype(float)
    unit = np.vstack([sobol_points(n, count, seed), corner_bits])
    return with_levels(net, net.domain_low + unit * (net.domain_high - net.domain_low))


def with_levels(net: Network, X: np.ndarray, shift: int = 0) -> np.ndarray:
    """Rows ``X`` of numeric features followed by level codes that cycle through every level of
    every categorical input (row i takes level (i + shift) mod L of each input), so that each level
    meets points spread through the domain; ``X`` itself when there are no categorical inputs."""
    if not getattr(net, "n_categorical", 0):
        return X
    rows = np.arange(X.shape[0])[:, None] + shift
    sizes = np.array([len(group) for group in net.categorical_levels])
    return np.hstack([X, (rows % sizes).astype(np.float64)])

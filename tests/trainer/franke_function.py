"""Franke's 2-D test function (Franke 1979), the usual benchmark of scattered-data fitting;
written from its published formula (from memory), on the unit square."""

from __future__ import annotations

import numpy as np


def franke(X: np.ndarray) -> np.ndarray:
    """Franke's function at the rows of X, shape (N, 2) -> (N,)."""
    x, y = 9.0 * X[:, 0], 9.0 * X[:, 1]
    return (0.75 * np.exp(-((x - 2) ** 2 + (y - 2) ** 2) / 4)
            + 0.75 * np.exp(-((x + 1) ** 2) / 49 - (y + 1) / 10)
            + 0.5 * np.exp(-((x - 7) ** 2 + (y - 3) ** 2) / 4)
            - 0.2 * np.exp(-((x - 4) ** 2) - (y - 7) ** 2))


def franke_rows(rows: int, seed: int, noise: float = 0.05):
    """Uniform points of the unit square and Franke's function plus noise uniform in
    [-noise, noise]."""
    rng = np.random.default_rng(seed)
    X = rng.random((rows, 2))
    return X, franke(X) + rng.uniform(-noise, noise, rows)

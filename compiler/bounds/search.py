"""Adversarial search: the largest value of an error function found inside a box.

Used to test that a certified bound holds (a bound a search can beat is no bound) and to measure
how tight it is, and by ``diff`` to find where two models differ most. It is a search, not a proof:
what it returns is a lower bound of the true maximum.

Method: seeded uniform points of the box plus its centre and (for up to 10 inputs) its corners;
then, from the best few points of each output, rounds of local maximisation: Gaussian steps around
the best point so far, shrinking every round, clipped into the box. Deterministic for a given seed.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class WorstCase:
    """Per output: the largest error found (``values``, shape (t,)) and where (``inputs``, (t, n))."""

    values: np.ndarray
    inputs: np.ndarray
    evaluations: int


def _corners(low: np.ndarray, high: np.ndarray) -> np.ndarray:
    n = low.size
    if n > 10:
        return np.empty((0, n))
    bits = (np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1
    return np.where(bits == 1, high, low)


def find_worst(error: Callable[[np.ndarray], np.ndarray], low, high, *, seed: int = 0,
               random_points: int = 20000, starts: int = 8, rounds: int = 10,
               steps: int = 64) -> WorstCase:
    """Maximise ``error(X) -> ndarray (rows, t)`` (non-negative; NaN counts as infinite) over the
    box [low, high] (ndarrays of shape (n,)), each output separately."""
    low, high = np.asarray(low, dtype=np.float64), np.asarray(high, dtype=np.float64)
    rng = np.random.default_rng(seed)
    width = high - low
    X = np.vstack([0.5 * (low + high), _corners(low, high),
                   low + rng.random((random_points, low.size)) * width])
    E = _checked(error(X))
    evaluations = X.shape[0]
    best_values, best_inputs = E.max(axis=0), X[E.argmax(axis=0)]
    for o in range(E.shape[1]):
        order = np.argsort(-E[:, o], kind="stable")[:starts]
        for row in order:
            point, value, scale = X[row], E[row, o], 0.05
            for _ in range(rounds):
                trial = np.clip(point + rng.normal(size=(steps, low.size)) * scale * width,
                                low, high)
                trial = np.vstack([point, trial])
                found = _checked(error(trial))[:, o]
                evaluations += trial.shape[0]
                k = int(np.argmax(found))
                point, value = trial[k], found[k]
                scale *= 0.6
            if value > best_values[o]:
                best_values[o], best_inputs[o] = value, point
    return WorstCase(best_values, best_inputs, evaluations)


def _checked(values) -> np.ndarray:
    values = np.atleast_2d(np.asarray(values, dtype=np.float64))
    return np.where(np.isnan(values), np.inf, values)

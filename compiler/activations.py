"""Activation functions: the one vocabulary shared by the trainer, the reference and every back-end.

Each activation knows its inflection point ``z0`` and its slope ``g'(z0)`` there, which is what the
data-driven generator needs to place a node, and its derivative, which the error estimate needs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np


def _logistic(z: np.ndarray) -> np.ndarray:
    # 0.5 * (1 + tanh(z / 2)) is exact in meaning, never overflows, and is faster than 1/(1+exp(-z)).
    return 0.5 + 0.5 * np.tanh(0.5 * z)


def _logistic_derivative(z: np.ndarray) -> np.ndarray:
    h = _logistic(z)
    return h * (1.0 - h)


def _tanh_derivative(z: np.ndarray) -> np.ndarray:
    t = np.tanh(z)
    return 1.0 - t * t


@dataclass(frozen=True)
class Activation:
    """A sigmoidal activation with its inflection point and the slope there."""

    name: str
    function: Callable[[np.ndarray], np.ndarray]
    derivative: Callable[[np.ndarray], np.ndarray]
    inflection: float
    slope_at_inflection: float
    low: float
    high: float


ACTIVATIONS: dict[str, Activation] = {
    "logistic": Activation("logistic", _logistic, _logistic_derivative, 0.0, 0.25, 0.0, 1.0),
    "tanh": Activation("tanh", np.tanh, _tanh_derivative, 0.0, 1.0, -1.0, 1.0),
}


def get_activation(name: str) -> Activation:
    """Return the activation called ``name``; raise ValueError naming the known ones."""
    try:
        return ACTIVATIONS[name]
    except KeyError:
        known = ", ".join(sorted(ACTIVATIONS))
        raise ValueError(f"unknown activation {name!r}; choose one of: {known}") from None

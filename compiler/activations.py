"""Activation functions: the one vocabulary shared by the trainer, the reference and every back-end.

Each activation knows its inflection point ``z0`` and its slope ``g'(z0)`` there, which is what the
data-driven generator needs to place a node, and its derivative, which the error estimate needs.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np


def _logistic_kernel(v: np.ndarray) -> np.ndarray:
    # logistic(z) = 1/2 + tanh(z / 2) / 2 with v = z / 2: never overflows, the form the back-ends
    # evaluate too, and in place it costs little more than 1/(1 + exp(-z)) with the sign folded in
    # (tests/benchmarks/trainer_fit.py measures both).
    np.tanh(v, out=v)
    v *= 0.5
    v += 0.5
    return v


def _tanh_kernel(v: np.ndarray) -> np.ndarray:
    return np.tanh(v, out=v)


def _logistic_slope(h: np.ndarray) -> np.ndarray:
    return h * (1.0 - h)


def _tanh_slope(h: np.ndarray) -> np.ndarray:
    return 1.0 - h * h


@dataclass(frozen=True)
class Activation:
    """A sigmoidal activation g with its inflection point ``inflection`` and the slope there.

    Evaluation goes through an in-place kernel: ``g(z) = kernel(kernel_scale * z)``, with
    ``kernel_scale`` a power of two so that callers may fold it into their weights exactly (the
    trainer does, and then evaluates blocks without temporaries, bit for bit like ``function``).
    """

    name: str
    kernel: Callable[[np.ndarray], np.ndarray]
    kernel_scale: float
    slope_of_value: Callable[[np.ndarray], np.ndarray]
    inflection: float
    slope_at_inflection: float
    low: float
    high: float

    def function(self, z: np.ndarray) -> np.ndarray:
        """g(z), a new array of the shape of ``z``."""
        v = np.array(z, dtype=np.float64)
        v *= self.kernel_scale
        return self.kernel(v)

    def derivative(self, z: np.ndarray) -> np.ndarray:
        """g'(z), a new array of the shape of ``z``."""
        return self.slope_of_value(self.function(z))


ACTIVATIONS: dict[str, Activation] = {
    "logistic": Activation("logistic", _logistic_kernel, 0.5, _logistic_slope, 0.0, 0.25, 0.0, 1.0),
    "tanh": Activation("tanh", _tanh_kernel, 1.0, _tanh_slope, 0.0, 1.0, -1.0, 1.0),
}


def get_activation(name: str) -> Activation:
    """Return the activation called ``name``; raise ValueError naming the known ones."""
    try:
        return ACTIVATIONS[name]
    except KeyError:
        known = ", ".join(sorted(ACTIVATIONS))
        raise ValueError(f"unknown activation {name!r}; choose one of: {known}") from None

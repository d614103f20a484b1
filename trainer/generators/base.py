"""What a generator returns."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True, eq=False)
class HiddenLayer:
    """Hidden weights of shape (n_nodes, n_features), biases of shape (n_nodes,), and counts of the
    degenerate cases the generator met (reported in the bundle's metadata)."""

    weights: np.ndarray
    biases: np.ndarray
    diagnostics: dict[str, int] = field(default_factory=dict)

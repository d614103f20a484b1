"""Training and validation figures summed over fixed row blocks, so that a fit read in memory,
chunk by chunk, or (up to rounding) on a cluster reports the same numbers."""

from __future__ import annotations

import numpy as np


class MetricSums:
    """Running sums of one model's errors: feed blocks of predictions and true values."""

    def __init__(self, task: str) -> None:
        self.task, self.rows, self.correct = task, 0, 0
        self.squares: np.ndarray | None = None
        self.largest: np.ndarray | None = None

    def update(self, predicted, truth) -> None:
        """predicted, truth : labels of shape (r,) (classification) or values of shape (r, t)."""
        self.rows += len(truth)
        if self.task == "classification":
            self.correct += int(np.sum(np.asarray(predicted) == np.asarray(truth)))
            return
        error = np.asarray(predicted).reshape(truth.shape) - truth
        squares, largest = np.sum(error**2, axis=0), np.max(np.abs(error), axis=0)
        self.squares = squares if self.squares is None else self.squares + squares
        self.largest = largest if self.largest is None else np.maximum(self.largest, largest)

    def merge(self, other: MetricSums) -> None:
        if other.rows == 0:
            return
        self.rows, self.correct = self.rows + other.rows, self.correct + other.correct
        if self.task == "regression":
            self.squares = other.squares if self.squares is None else self.squares + other.squares
            self.largest = other.largest if self.largest is None else np.maximum(self.largest,
                                                                                 other.largest)

    def result(self) -> dict:
        if self.task == "classification":
            return {"accuracy": self.correct / self.rows, "rows": self.rows}
        return {"rmse": [float(v) for v in np.sqrt(self.squares / self.rows)],
                "max_abs_error": [float(v) for v in self.largest], "rows": self.rows}

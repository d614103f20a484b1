"""The accuracy budget: how far an artifact may stray from the model and still be "as good as the
model". By default ``ACCURACY_SHARE`` of the model's own validation RMSE, recorded in the bundle by
the trainer (per output; classifiers: per class score): an artifact within that of the model has an
RMSE at most that share above the model's (the RMSE obeys the triangle inequality, so a pointwise
deviation of at most B moves it by at most B). An absolute tolerance (target units) or a relative one
(share of each output's range) overrides it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ACCURACY_SHARE = 0.05


@dataclass(frozen=True)
class Budget:
    """Allowed certified error per output (target units; infinite where none is known) and its rule."""

    per_output: tuple[float, ...]
    rule: str
    source: str

    def exceeded_by(self, bound) -> list[int]:
        return [o for o, (b, limit) in enumerate(zip(bound, self.per_output, strict=True))
                if b > limit]

    def as_dict(self) -> dict:
        """JSON-ready: an output without a budget is null."""
        return {"per_output": [v if np.isfinite(v) else None for v in self.per_output],
                "rule": self.rule, "source": self.source}


def recorded_rmse(metadata: dict, n_outputs: int) -> tuple[np.ndarray, str] | None:
    """The model's validation RMSE per output (else its training RMSE) from the bundle metadata."""
    metrics = metadata.get("metrics") if isinstance(metadata, dict) else None
    for split in ("validation", "training"):
        record = metrics.get(split) if isinstance(metrics, dict) else None
        rmse = record.get("rmse") if isinstance(record, dict) else None
        try:
            values = np.asarray(rmse, dtype=np.float64).reshape(-1)
        except (TypeError, ValueError):
            continue
        if values.shape == (n_outputs,) and np.all(np.isfinite(values)) and np.all(values > 0):
            return values, split
    return None


def accuracy_budget(bundle, abs_tol: float | None = None, rel_tol: float | None = None,
                    output_range=None) -> Budget:
    """The budget for ``bundle``'s artifacts (see the module doc)."""
    t = bundle.network.n_outputs
    if abs_tol is not None:
        return Budget((float(abs_tol),) * t, f"--abs-tol {abs_tol!r} in target units", "abs-tol")
    if rel_tol is not None:
        values = tuple(float(rel_tol * r) for r in np.asarray(output_range))
        return Budget(values, f"--rel-tol {rel_tol!r} of each output's range", "rel-tol")
    recorded = recorded_rmse(bundle.metadata, t)
    if recorded is None:
        return Budget((float("inf"),) * t, "no budget: the bundle records no model error "
                      "(give --abs-tol)", "none")
    rmse, split = recorded
    return Budget(tuple(float(ACCURACY_SHARE * v) for v in rmse),
                  f"{ACCURACY_SHARE:.0%} of the model's {split} RMSE", split)

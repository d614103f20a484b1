"""Tolerances for verification, derived from the artifact's precision and the error estimate.

Default: ``SAFETY_FACTOR`` times the estimate of :mod:`nodecast.compiler.numerics` for the artifact's
precision (and activation implementation), plus the float64 reference's own rounding. The factor
covers what the first-order estimate leaves out (the runtime's summation order, fused multiply-add).
``abs_tol`` (target units) or ``rel_tol`` (a fraction of the output range over the probes) override it.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

SAFETY_FACTOR = 2.0


@dataclass(frozen=True)
class Tolerance:
    per_output: tuple[float, ...]
    rule: str

    def as_dict(self) -> dict:
        return {"per_output": list(self.per_output), "rule": self.rule}


def derive(estimate_per_output, reference_estimate_per_output, abs_tol=None, rel_tol=None,
           output_range=None) -> Tolerance:
    if abs_tol is not None:
        return Tolerance(tuple(float(abs_tol) for _ in estimate_per_output), f"--abs-tol {abs_tol!r}")
    if rel_tol is not None:
        values = tuple(float(rel_tol * r) for r in np.asarray(output_range))
        return Tolerance(values, f"--rel-tol {rel_tol!r} of the output range over the probes")
    values = tuple(SAFETY_FACTOR * e + r for e, r in
                   zip(estimate_per_output, reference_estimate_per_output))
    return Tolerance(values, f"{SAFETY_FACTOR:g} x the export-error estimate + the reference's rounding")

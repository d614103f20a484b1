"""Tolerances for verification, derived from the artifact's precision and the error estimate.

Derived rule (the default), per output k:

    tolerance_k = SAFETY_FACTOR * estimate_k(artifact precision, activation error) + reference_k

where ``estimate_k`` is :func:`nodecast.compiler.numerics.estimate` for the artifact's precision and
its activation implementation's stated error, and ``reference_k`` the same estimate for float64: the
reference rounds too, and the artifact is compared with the reference, not with exact arithmetic.
``SAFETY_FACTOR`` covers what the first-order estimate leaves out (the runtime's summation order,
fused multiply-add, probes between the estimate's own probe points). Rounding limits come from
IEEE 754 (float32 unit roundoff 2^-24, float64 2^-53) and, for fixed point, the Q-format step
(Q15: 2^-15).

Overrides: ``abs_tol`` (target units, every output) or ``rel_tol`` (a share of each output's range
over the in-domain probes). An override below the estimate is allowed, and the report says so: at
such a tolerance rounding alone may fail the artifact.

Out-of-domain probes under the "pass" policy are evaluated where the estimate's probes never went;
there the derived tolerance uses the estimate at those very probes when that is larger
(:func:`for_points`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError

SAFETY_FACTOR = 2.0


@dataclass(frozen=True)
class Tolerance:
    """Allowed absolute error per output (target units) and how it was set.

    ``source`` is "derived", "abs-tol" or "rel-tol"; ``estimate`` and ``reference_rounding`` are the
    per-output estimates (artifact precision, float64) the derived rule starts from.
    """

    per_output: tuple[float, ...]
    source: str
    precision: str
    estimate: tuple[float, ...]
    reference_rounding: tuple[float, ...]
    safety_factor: float = SAFETY_FACTOR
    given: float | None = None

    @property
    def rule(self) -> str:
        if self.source == "abs-tol":
            return f"--abs-tol {self.given!r}, in target units"
        if self.source == "rel-tol":
            return f"--rel-tol {self.given!r} of the output range over the in-domain probes"
        return (f"{self.safety_factor:g} x the {self.precision} export-error estimate "
                f"+ the float64 reference's own rounding")

    def as_dict(self) -> dict:
        return {"per_output": list(self.per_output), "rule": self.rule, "source": self.source,
                "given": self.given,
                "precision": self.precision, "safety_factor": self.safety_factor,
                "estimate": list(self.estimate),
                "reference_rounding": list(self.reference_rounding)}

    def below_estimate(self) -> list[int]:
        """Outputs whose tolerance is smaller than the artifact precision's own estimate."""
        below = np.asarray(self.per_output) < np.asarray(self.estimate)
        return [int(k) for k in np.flatnonzero(below)]


def derive(estimate, reference_estimate, abs_tol=None, rel_tol=None,
           output_range=None) -> Tolerance:
    """The tolerance for an artifact whose precision has ``estimate`` (an ErrorEstimate).

    Parameters
    ----------
    estimate, reference_estimate : ErrorEstimate for the artifact's precision and for float64.
    abs_tol, rel_tol : float or None, overrides (abs_tol wins when both are given).
    output_range : ndarray of shape (n_outputs,), the reference's range over the in-domain probes.
    """
    est, ref = tuple(estimate.per_output), tuple(reference_estimate.per_output)
    if abs_tol is not None:
        values, source, given = tuple(float(abs_tol) for _ in est), "abs-tol", float(abs_tol)
    elif rel_tol is not None:
        values = tuple(float(rel_tol * r) for r in np.asarray(output_range))
        source, given = "rel-tol", float(rel_tol)
    else:
        values, source, given = _derived(SAFETY_FACTOR, est, ref), "derived", None
    if not all(np.isfinite(values)):
        raise NodecastError(f"no finite tolerance for this {estimate.precision} artifact: its error "
                            "estimate is not finite (the model's values overflow that precision); "
                            "give --abs-tol to verify it anyway")
    return Tolerance(values, source, estimate.precision, est, ref, given=given)


def for_points(tolerance: Tolerance, estimate, reference_estimate) -> Tolerance:
    """A derived tolerance widened to the estimate at other probes (overrides stay as given)."""
    if tolerance.source != "derived":
        return tolerance
    est = tuple(np.maximum(tolerance.estimate, estimate.per_output).tolist())
    ref = tuple(np.maximum(tolerance.reference_rounding, reference_estimate.per_output).tolist())
    factor = tolerance.safety_factor
    return Tolerance(_derived(factor, est, ref), "derived", tolerance.precision, est, ref, factor)


def _derived(factor: float, estimate, reference_rounding) -> tuple[float, ...]:
    values = factor * np.asarray(estimate) + np.asarray(reference_rounding)
    return tuple(float(v) for v in values)

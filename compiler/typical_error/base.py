"""The typical export-error estimate's common parts: its record and its coverage factor.

The typical estimate (:mod:`.floating`, :mod:`.fixed`) says how far an
artifact usually strays from the float64 reference on probes of the domain; it is shown beside the
certified bound (:mod:`nodecast.compiler.bounds`), which is the promise.
"""

from __future__ import annotations

from dataclasses import dataclass

COVERAGE = 4.0  # a normal error's maximum over some 10^4 probes reaches about 4 sigma


@dataclass(frozen=True)
class ErrorEstimate:
    """Estimated maximum absolute error per output (target units) for one precision."""

    precision: str
    per_output: tuple[float, ...]
    worst_case: tuple[float, ...]
    probes: int

    @property
    def max_abs(self) -> float:
        return max(self.per_output)

    def as_dict(self) -> dict:
        return {"precision": self.precision, "max_abs_error": self.max_abs,
                "per_output": list(self.per_output), "worst_case_bound": list(self.worst_case),
                "probes": self.probes}

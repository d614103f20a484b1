"""The typical export error of an artifact: an estimate on probes of the domain, not a bound.

``estimate(net, precision, X, activation_error, table_size)`` dispatches to the floating-point model
(:mod:`.floating`) or the fixed-point one (:mod:`.fixed`).
"""

from __future__ import annotations

from nodecast.compiler.targets import UNIT_ROUNDOFF
from nodecast.compiler.typical_error.base import COVERAGE, ErrorEstimate

__all__ = ["COVERAGE", "UNIT_ROUNDOFF", "ErrorEstimate", "estimate"]


def estimate(net, precision: str, X=None, activation_error: float = 0.0, **fixed_options):
    """The typical estimate of ``net`` evaluated in ``precision`` (float32, float64, q15, q31)."""
    if precision in ("q15", "q31"):
        from nodecast.compiler.typical_error import fixed

        return fixed.estimate(net, precision, X, activation_error, **fixed_options)
    from nodecast.compiler.typical_error import floating

    return floating.estimate(net, precision, X, activation_error)

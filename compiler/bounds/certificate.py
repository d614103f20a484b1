"""The certified bound of an artifact: one computation that emit writes into the artifact, inspect
prints, select's precision budget uses and verify recomputes (never reading it from the artifact).

``certify(net, target, precision, ...)`` returns a :class:`Certificate`: per output, a number B
with |artifact(x) - model(x)| <= B for every x of the box (by default the declared domain; under a
clamping policy also every x the artifact clamps into it), where model is the trained network in
exact arithmetic, in target units. The stated value is rounded up to three significant digits, so
the text in an artifact is short and the same on every machine.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.bounds import activations as proven
from nodecast.compiler.bounds import fixed, floating, programs
from nodecast.compiler.bounds.branch import refine
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network

# the precisions each target can execute (an artifact declaring another is refused)
TARGET_PRECISIONS = {"c": ("float64", "float32", "q31", "q15"), "onnx": ("float64", "float32"),
                     "python": ("float64",), "reference": ("float64",)}
_WORK = 6_000_000  # node-input evaluations the refinement may spend per output (sets the budget)
_MIN_BOXES, _MAX_BOXES = 16, 1024
SCREENING_BOXES = 64  # a coarser refinement for many candidate models (select): looser, certified


@dataclass(frozen=True)
class Certificate:
    """Certified bound per output (target units) of one artifact configuration."""

    target: str
    precision: str
    per_output: tuple[float, ...]
    assumption: str
    boxes: int

    @property
    def worst(self) -> float:
        return max(self.per_output)

    max_abs = worst  # the name select's budget reads

    def as_dict(self) -> dict:
        return {"target": self.target, "precision": self.precision,
                "certified_bound": list(self.per_output), "assumes": self.assumption,
                "boxes": self.boxes}


def round_up(value: float) -> float:
    """``value`` rounded up to three significant digits (a float that is >= value)."""
    if not np.isfinite(value):
        return math.inf
    if value <= 0.0:
        return 0.0
    exponent = math.floor(math.log10(value)) - 2
    stated = float(f"{math.ceil(value / 10.0**exponent)}e{exponent}")
    while stated < value:
        stated = float(f"{round(stated / 10.0**exponent) + 1}e{exponent}")
    return stated


def _budget(net: Network) -> int:
    per_box = net.n_nodes * (net.n_features + net.n_outputs)
    return int(np.clip(_WORK // max(per_box, 1), _MIN_BOXES, _MAX_BOXES))


def _impact(net: Network) -> np.ndarray:
    """How much each input's width moves the pre-activations: where to split a box."""
    return np.abs(net.hidden_weights / net.input_scale).sum(axis=0)


def _assumption(target: str, precision: str, impl: str | None) -> str:
    if target == "onnx":
        return (f"the runtime's Tanh and Sigmoid are within {proven.RUNTIME_ULPS:g} ulp of exact; "
                "any summation order")
    if target == "python":
        return f"math.tanh is within {proven.LIBM_ULPS:g} ulp of exact"
    if target == "reference":
        return f"numpy's tanh is within {proven.NUMPY_ULPS:g} ulp of exact"
    if precision in ("q15", "q31"):
        return "none beyond C99 with arithmetic right shifts of negative values"
    if impl == "libm":
        return (f"the C library's tanh{'f' if precision == 'float32' else ''} is within "
                f"{proven.LIBM_ULPS:g} ulp of exact")
    return "the activation's float32 operations are not contracted (C99 mode or -ffp-contract=off)" \
        if precision == "float32" else "none beyond IEEE 754 arithmetic"


def box_function(net: Network, target: str, precision: str, activation_impl: str | None = None,
                 table_size: int | None = None):
    """The per-box bound ``f(lows, highs) -> (B, t)`` of one artifact configuration."""
    if precision not in TARGET_PRECISIONS.get(target, ()):
        known = ", ".join(TARGET_PRECISIONS.get(target, ()))
        raise NodecastError(f"a {target} artifact computes in {known or 'no known precision'}, "
                            f"not precision {precision!r}")
    if target == "c" and precision in ("q15", "q31"):
        from nodecast.compiler.fixedpoint import make_plan

        plan = make_plan(net, precision, table_size)
        program = fixed.FixedProgram(plan, net)
        program.y_ceiling = fixed.certified_ceiling(plan, net)
        return lambda lo, hi: fixed.box_bounds(program, lo, hi)
    if target == "c":
        program = programs.c_float_program(net, precision, activation_impl or "libm", table_size)
    elif target == "onnx":
        program = programs.onnx_program(net, precision)
    elif target == "python":
        program = programs.python_program(net)
    elif target == "reference":
        program = programs.reference_program(net)
    else:
        raise NodecastError(f"no certified bound for target {target!r}")
    return lambda lo, hi: floating.box_bounds(program, lo, hi)


def certify(net: Network, target: str, precision: str, activation_impl: str | None = None,
            table_size: int | None = None, low=None, high=None, boxes: int | None = None
            ) -> Certificate:
    """Certified bound of ``target`` at ``precision`` over the box [low, high] (default: the
    declared domain), refined by branch and bound over at most ``boxes`` boxes (default: set by
    the model's size; fewer boxes give a looser, still certified bound); see the module doc."""
    low = net.domain_low if low is None else np.asarray(low, dtype=np.float64)
    high = net.domain_high if high is None else np.asarray(high, dtype=np.float64)
    bound = box_function(net, target, precision, activation_impl, table_size)
    impact = _impact(net)
    with np.errstate(over="ignore", invalid="ignore"):
        refined = refine(bound, low, high, impact, boxes or _budget(net))
    values = tuple(round_up(float(v)) if np.isfinite(v) else math.inf for v in refined.bound)
    return Certificate(target, precision, values,
                       _assumption(target, precision, activation_impl), refined.boxes)


def screening_bound(net: Network, precision: str) -> float:
    """The certified bound of the default C artifact at ``precision`` from a coarse refinement
    (max over outputs): how select screens grid points and the trainer its ridge."""
    return certify(net, "c", precision, boxes=SCREENING_BOXES).worst

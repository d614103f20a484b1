"""The certified bound of an artifact: one computation that emit writes into the artifact, inspect
prints, select's precision budget uses and verify recomputes (never reading it from the artifact).

``certify(net, target, precision, ...)`` returns a :class:`Certificate`: per output, a number B
with |artifact(x) - model(x)| <= B for every x of the box (by default the declared domain; under a
clamping policy also every x the artifact clamps into it), where model is the trained network in
exact arithmetic, in target units. The stated value is rounded up to three significant digits, so
the text in an artifact is short and the same on every machine.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.bounds import activations as proven
from nodecast.compiler.bounds import fixed, floating, programs
from nodecast.compiler.bounds.branch import refine
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.compiler.targets import TARGETS

# the precisions each target can execute (an artifact declaring another is refused)
TARGET_PRECISIONS = {**{name: spec.precisions for name, spec in TARGETS.items()},
                     "reference": ("float64",)}
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
    if impl is None:
        impl = TARGETS["c"].option("activation_impl").default_value(precision)
    if impl == "libm":
        return (f"the C library's tanh{'f' if precision == 'float32' else ''} is within "
                f"{proven.LIBM_ULPS:g} ulp of exact")
    return "the activation's float32 operations are not contracted (C99 mode or -ffp-contract=off)" \
        if precision == "float32" else "none beyond IEEE 754 arithmetic"


def box_function(net: Network, target: str, precision: str, activation_impl: str | None = None,
                 table_size: int | None = None, extra_terms: int = 0, level_abs=0.0,
                 scales: str | None = None, plan=None):
    """The per-box bound ``f(lows, highs) -> (B, t)`` of one artifact configuration
    (``extra_terms``/``level_abs``: see :func:`certify` and :class:`floating.FloatProgram`;
    ``plan``: a fixed-point artifact's plan, when the caller made it already)."""
    if precision not in TARGET_PRECISIONS.get(target, ()):
        known = ", ".join(TARGET_PRECISIONS.get(target, ()))
        raise NodecastError(f"a {target} artifact computes in {known or 'no known precision'}, "
                            f"not precision {precision!r}")
    if target == "c" and precision in ("q15", "q31"):
        from nodecast.compiler.passes.quantise import make_plan

        if plan is None:
            plan = make_plan(net, precision, table_size,
                             scales or TARGETS["c"].option("scales").default_value(precision))
        program = fixed.FixedProgram(plan, net)
        return lambda lo, hi: fixed.box_bounds(program, lo, hi)
    if target == "c":
        impl = activation_impl or TARGETS["c"].option("activation_impl").default_value(precision)
        program = programs.c_float_program(net, precision, impl, table_size)
    elif target == "onnx":
        program = programs.onnx_program(net, precision)
    elif target == "python":
        program = programs.python_program(net)
    elif target == "reference":
        program = programs.reference_program(net)
    else:
        raise NodecastError(f"no certified bound for target {target!r}")
    if extra_terms:  # level vectors stored apart from the bias: their own rounding, twice over
        program = dataclasses.replace(program, extra_terms=extra_terms, extra_z_error=2 * program.unit
                                      * (np.abs(program.stored_biases) + level_abs))
    return lambda lo, hi: floating.box_bounds(program, lo, hi)


def certify(net: Network, target: str, precision: str, activation_impl: str | None = None,
            table_size: int | None = None, low=None, high=None, boxes: int | None = None,
            scales: str | None = None, plan=None) -> Certificate:
    """Certified bound of ``target`` at ``precision`` over the box [low, high] (default: the
    declared domain), refined by branch and bound over at most ``boxes`` boxes (default: set by
    the model's size; fewer boxes give a looser, still certified bound); see the module doc.

    With categorical inputs, every combination of levels (and of an unknown level, which adds
    nothing) is certified as the network whose biases hold that combination's level vectors, and
    the bound is the largest over them. ``scales`` (q15/q31: "node", the default, or "layer")
    and ``plan`` (the fixed-point plan an emit made already) select the fixed-point program.
    """
    low = net.domain_low if low is None else np.asarray(low, dtype=np.float64)[: net.n_features]
    high = net.domain_high if high is None else np.asarray(high, dtype=np.float64)[: net.n_features]
    budget = boxes or _budget(net)
    worst, evaluated = np.zeros(net.n_outputs), 0
    variants = list(_level_variants(net))
    for variant, extra_terms, level_abs in variants:
        bound = box_function(variant, target, precision, activation_impl, table_size,
                             extra_terms, level_abs, scales, plan)
        with np.errstate(over="ignore", invalid="ignore"):
            refined = refine(bound, low, high, _impact(net),
                             max(_MIN_BOXES, budget // len(variants)))
        worst, evaluated = np.maximum(worst, refined.bound), evaluated + refined.boxes
    values = tuple(round_up(float(v)) if np.isfinite(v) else math.inf for v in worst)
    return Certificate(target, precision, values,
                       _assumption(target, precision, activation_impl), evaluated)


MAX_LEVEL_COMBINATIONS = 1024


def _level_variants(net: Network):
    """(network without categorical inputs, their count, |level vectors| summed) per combination
    of levels; the network itself when it has none."""
    if not net.n_categorical:
        yield net, 0, 0.0
        return
    choices = [range(-1, len(levels)) for levels in net.categorical_levels]
    count = math.prod(len(c) for c in choices)
    if count > MAX_LEVEL_COMBINATIONS:
        raise NodecastError(f"the categorical inputs have {count} combinations of levels; the "
                            f"certified bound covers at most {MAX_LEVEL_COMBINATIONS}")
    for combination in itertools.product(*choices):
        rows = [net.level_start(c) + k for c, k in enumerate(combination) if k >= 0]
        vectors = net.level_weights[rows]
        yield (net.replace(hidden_biases=net.hidden_biases + vectors.sum(axis=0),
                           categorical_names=(), categorical_levels=(), level_weights=None),
               net.n_categorical, np.abs(vectors).sum(axis=0))


def screening_bound(net: Network, precision: str) -> float:
    """The certified bound of the default C artifact at ``precision`` from a coarse refinement
    (max over outputs): how select screens grid points and the trainer its ridge."""
    return certify(net, "c", precision, boxes=SCREENING_BOXES).worst

"""What each hidden-node generator is searched over, and the hidden layers a search draws.

A search draws one hidden layer per :class:`LayerSpec` (a generator and one value of each of its
own hyper-parameters) and fold; nodes M and ridge lambda are shared axes scored from that draw.
Each generator's axes, with the ``select``/``compare`` option that sets them and the default grid
used when the option is not given:

=================  ===============  ==================  =========================================
generator          parameter        option              default grid
=================  ===============  ==================  =========================================
data-driven        n_neighbors      --neighbors         default (max(10, 2 (n + 1)))
                   slope_scale      --slope-scales      1
interval           interval         --intervals         0.1, 0.3, 1, 3, 10, 30
domain-anchored    interval         --intervals         0.1, 0.3, 1, 3, 10, 30
slope-angle        angle_range      --angle-ranges      0:20, 0:45, 0:70, 0:85, 0:88 (degrees)
weight-sum         weight_sum       --weight-sums       0.5:2.5, 1:5, 2:10, 5:25, 10:50
=================  ===============  ==================  =========================================
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from nodecast.compiler.errors import NodecastError


def _is_int(value) -> bool:
    return isinstance(value, (int, np.integer)) and not isinstance(value, bool)


def _is_real(value) -> bool:
    return _is_int(value) or (isinstance(value, (float, np.floating)) and math.isfinite(value))


def _is_pair(value) -> bool:
    return isinstance(value, (tuple, list)) and len(value) == 2 and all(map(_is_real, value))


def valid_angles(value) -> bool:
    return _is_pair(value) and 0 <= value[0] <= value[1] < 90


def valid_sums(value) -> bool:
    return _is_pair(value) and 0 < value[0] <= value[1]


@dataclass(frozen=True)
class Axis:
    """One hyper-parameter of a generator: estimator parameter, option name, default values, rule."""

    param: str
    option: str
    default: tuple
    valid: Callable
    rule: str

    def normalise(self, value):
        return (None if value is None else int(value)) if self.param == "n_neighbors" else \
            (tuple(float(v) for v in value) if isinstance(value, (tuple, list)) else float(value))


NEIGHBORS = Axis("n_neighbors", "--neighbors", (None,),
                 lambda v: v is None or (_is_int(v) and v >= 1),
                 "positive integers (or None / 'default' for max(10, 2 (n + 1)))")
SLOPE_SCALES = Axis("slope_scale", "--slope-scales", (1.0,), lambda v: _is_real(v) and v > 0,
                    "positive numbers")
INTERVALS = Axis("interval", "--intervals", (0.1, 0.3, 1.0, 3.0, 10.0, 30.0),
                 lambda v: _is_real(v) and v > 0, "positive numbers")
ANGLE_RANGES = Axis("angle_range", "--angle-ranges",
                    ((0.0, 20.0), (0.0, 45.0), (0.0, 70.0), (0.0, 85.0), (0.0, 88.0)), valid_angles,
                    "LO:HI pairs of degrees with 0 <= LO <= HI < 90")
WEIGHT_SUMS = Axis("weight_sum", "--weight-sums",
                   ((0.5, 2.5), (1.0, 5.0), (2.0, 10.0), (5.0, 25.0), (10.0, 50.0)), valid_sums,
                   "R:S pairs with 0 < R <= S")

AXES: dict[str, tuple[Axis, ...]] = {
    "data-driven": (NEIGHBORS, SLOPE_SCALES),
    "interval": (INTERVALS,),
    "domain-anchored": (INTERVALS,),
    "slope-angle": (ANGLE_RANGES,),
    "weight-sum": (WEIGHT_SUMS,),
}
ALL_AXES = {axis.param: axis for axes in AXES.values() for axis in axes}


@dataclass(frozen=True)
class LayerSpec:
    """A generator and one value of each of its hyper-parameters (estimator parameter names)."""

    method: str
    settings: tuple[tuple[str, object], ...]

    @property
    def kwargs(self) -> dict:
        return dict(self.settings)

    def sort_key(self) -> tuple:
        return (self.method,) + tuple(-1 if v is None else v for _, v in self.settings)

    def describe(self) -> str:
        return " ".join([f"method={self.method}"] + [f"{_short(k)}={format_value(v)}"
                                                     for k, v in self.settings])

    def as_dict(self) -> dict:
        return {"method": self.method,
                "settings": {k: list(v) if isinstance(v, tuple) else v for k, v in self.settings}}


def _short(param: str) -> str:
    return {"n_neighbors": "neighbors"}.get(param, param)


def format_value(value) -> str:
    if value is None:
        return "default"
    if isinstance(value, tuple):
        return ":".join(f"{v:g}" for v in value)
    return f"{value:g}"


def layer_grid(methods, values: dict) -> tuple[LayerSpec, ...]:
    """The layers a search draws: per method, the product of its axes' values.

    methods : generator names; values : maps a parameter (``n_neighbors``, ``slope_scale``,
    ``interval``, ``angle_range``, ``weight_sum``) to its list of values, or None for the default.
    Raises NodecastError naming an unknown method, a bad value, or values for a parameter that no
    chosen method has.
    """
    methods = list(dict.fromkeys([methods] if isinstance(methods, str) else methods))
    if not methods:
        raise NodecastError("method needs at least one generator")
    unknown = [m for m in methods if m not in AXES]
    if unknown:
        raise NodecastError(f"unknown method {unknown[0]!r}; choose from {', '.join(AXES)}")
    used = {axis.param for m in methods for axis in AXES[m]}
    for param, given in values.items():
        if given is not None and param not in used:
            axis = ALL_AXES[param]
            owners = [m for m, axes in AXES.items() if axis in axes]
            raise NodecastError(f"{axis.option} sets {param} of {' and '.join(owners)}, which the "
                                f"chosen methods ({', '.join(methods)}) do not include")
    specs = []
    for method in methods:
        axes = AXES[method]
        columns = [_axis_values(axis, values.get(axis.param)) for axis in axes]
        for combo in itertools.product(*columns):
            specs.append(LayerSpec(method, tuple(zip((a.param for a in axes), combo, strict=True))))
    return tuple(specs)


def _axis_values(axis: Axis, given) -> list:
    values = list(axis.default if given is None else given)
    if not values:
        raise NodecastError(f"{axis.option} needs at least one value")
    for value in values:
        if not axis.valid(value):
            raise NodecastError(f"{axis.option} takes {axis.rule}, got {value!r}")
    unique = {axis.normalise(v) for v in values}
    return sorted(unique, key=lambda v: -1 if v is None else v)

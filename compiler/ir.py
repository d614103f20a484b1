"""The network description (IR): the one immutable object between the trainer and every back-end.

Coordinates. Inputs are normalised per feature, ``u = (x - input_offset) / input_scale``; the hidden
layer works on ``u``; the output layer produces normalised targets ``v``, mapped back to target units
by ``y = output_offset + output_scale * v``. For classifiers the outputs are per-class scores and the
output scaling is the identity.

Categorical inputs. A network may also take categorical inputs, each a level out of a fixed list of
texts. Level ``k`` of categorical input ``c`` adds the vector ``level_weights[level_start(c) + k]``
(one value per node) to every pre-activation: it is the one-hot column of that level times its
hidden weights, so ``z = u @ hidden_weights.T + hidden_biases + sum_c level_weights[start_c + k_c]``.
Rows of numbers hand categorical inputs over as level codes (0-based positions in the level list)
after the numeric features: a row is ``(x_1 .. x_n, k_1 .. k_C)``. A code that names no level
(negative, too large, fractional, NaN) is an unknown level, which the out-of-domain policy
handles: "pass" adds nothing (the all-zero one-hot), "clamp" takes level 0, "reject" refuses the row.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field, fields
from typing import Literal

import numpy as np

from nodecast.compiler.activations import get_activation
from nodecast.compiler.errors import NodecastError

Task = Literal["regression", "classification"]
# Content limits (docs/reliability.md, "Bundles"): far beyond any trained model, and low enough that
# squares and sums of these values stay finite in float64 everywhere nodecast computes with them.
MAX_MAGNITUDE = 1e100
MIN_SCALE = 1e-100
OUT_OF_DOMAIN_POLICIES = ("clamp", "pass", "reject")

ARRAY_FIELDS = (
    "hidden_weights",
    "hidden_biases",
    "output_weights",
    "output_bias",
    "input_offset",
    "input_scale",
    "output_offset",
    "output_scale",
    "domain_low",
    "domain_high",
)


def _frozen_array(value, name: str, ndim: int) -> np.ndarray:
    array = np.array(value, dtype=np.float64, copy=True)
    if array.ndim != ndim:
        raise ValueError(f"{name} must have {ndim} dimension(s), got shape {array.shape}")
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name} holds non-finite values")
    array.setflags(write=False)
    return array


@dataclass(frozen=True, eq=False)
class Network:
    """A trained single-hidden-layer network with random hidden nodes.

    Attributes
    ----------
    hidden_weights : ndarray of shape (n_nodes, n_features), acting on normalised inputs.
    hidden_biases : ndarray of shape (n_nodes,)
    activation : str, a name known to :mod:`nodecast.compiler.activations`.
    output_weights : ndarray of shape (n_nodes, n_outputs), producing normalised outputs.
    output_bias : ndarray of shape (n_outputs,)
    input_offset, input_scale : ndarray of shape (n_features,)
    output_offset, output_scale : ndarray of shape (n_outputs,)
    domain_low, domain_high : ndarray of shape (n_features,), the declared input domain.
    feature_names, feature_units : tuple of str, one per feature.
    target_names, target_units : tuple of str, one per output (classifiers: one per class).
    task : "regression" or "classification".
    class_labels : tuple of str, the original labels of a classifier's outputs (empty otherwise).
    categorical_names : tuple of str, one per categorical input (empty: none).
    categorical_levels : tuple of tuples of str, the levels of each categorical input in code order.
    level_weights : ndarray of shape (total levels, n_nodes), each level's contribution to every
        pre-activation, the levels of input 0 first (an empty (0, n_nodes) array when there are no
        categorical inputs; None is read as that).
    """

    hidden_weights: np.ndarray
    hidden_biases: np.ndarray
    activation: str
    output_weights: np.ndarray
    output_bias: np.ndarray
    input_offset: np.ndarray
    input_scale: np.ndarray
    output_offset: np.ndarray
    output_scale: np.ndarray
    domain_low: np.ndarray
    domain_high: np.ndarray
    feature_names: tuple[str, ...]
    target_names: tuple[str, ...]
    feature_units: tuple[str, ...] = field(default=())
    target_units: tuple[str, ...] = field(default=())
    task: Task = "regression"
    class_labels: tuple[str, ...] = field(default=())
    categorical_names: tuple[str, ...] = field(default=())
    categorical_levels: tuple[tuple[str, ...], ...] = field(default=())
    level_weights: np.ndarray | None = None

    def __post_init__(self) -> None:
        dims = {"hidden_weights": 2, "output_weights": 2}
        for name in ARRAY_FIELDS:
            object.__setattr__(self, name, _frozen_array(getattr(self, name), name, dims.get(name, 1)))
        get_activation(self.activation)
        for name in ("feature_names", "target_names", "feature_units", "target_units", "class_labels"):
            object.__setattr__(self, name, tuple(str(v) for v in getattr(self, name)))
        if not self.feature_units:
            object.__setattr__(self, "feature_units", ("",) * len(self.feature_names))
        if not self.target_units:
            object.__setattr__(self, "target_units", ("",) * len(self.target_names))
        self._check_shapes()
        self._check_magnitudes()
        self._check_names()
        self._freeze_categorical()

    def _check_names(self) -> None:
        """Names must be valid Unicode (written as UTF-8), hold no NUL (C strings end there) and be
        distinct in each list: artifacts and outputs address features, targets and classes by name.
        Feature names are found in CSV headers, so they must be non-empty, without surrounding
        spaces."""
        for name in ("feature_names", "target_names", "class_labels", "feature_units",
                     "target_units"):
            values = getattr(self, name)
            for value in values:
                try:
                    value.encode("utf-8")
                except UnicodeEncodeError:
                    raise NodecastError(f"{name} entry {value!r} is not valid Unicode") from None
                if "\x00" in value:  # C strings would end there
                    raise NodecastError(f"{name} entry {value!r} holds a NUL character")
            if name in ("feature_names", "target_names", "class_labels"):
                repeated = sorted(value for value, count in Counter(values).items() if count > 1)
                if repeated:
                    raise NodecastError(f"{name} repeats {repeated[0]!r}; names must be distinct")
        for value in self.feature_names:  # CSV readers match header cells with spaces stripped
            if value == "" or value.strip() != value:
                raise NodecastError(f"feature name {value!r} is empty or starts or ends with "
                                    "white space; CSV headers could never match it")

    def _check_magnitudes(self) -> None:
        """Refuse absurd but finite numbers (a hostile bundle's 1e308): every stored value, the
        normalised domain, the pre-activation and the output bounds over the domain within
        MAX_MAGNITUDE, and scales at least MIN_SCALE."""
        for name in ARRAY_FIELDS:
            array = getattr(self, name)
            if array.size and float(np.max(np.abs(array))) > MAX_MAGNITUDE:
                raise NodecastError(f"{name} holds {float(np.max(np.abs(array))):.3g}, beyond the "
                                    f"{MAX_MAGNITUDE:.0e} this tool accepts (a broken or hostile "
                                    "model)")
        for name in ("input_scale", "output_scale"):
            if float(np.min(getattr(self, name))) < MIN_SCALE:
                raise NodecastError(f"{name} holds {float(np.min(getattr(self, name))):.3g}, below "
                                    f"the {MIN_SCALE:.0e} this tool accepts (a broken or hostile "
                                    "model)")
        with np.errstate(all="ignore"):
            reach = np.maximum(np.abs(self.domain_low - self.input_offset),
                               np.abs(self.domain_high - self.input_offset)) / self.input_scale
            z = np.abs(self.hidden_weights) @ reach + np.abs(self.hidden_biases)
            y = np.abs(self.output_offset) + self.output_scale * (
                np.sum(np.abs(self.output_weights), axis=0) + np.abs(self.output_bias))
        for what, values in (("the normalised domain", reach), ("the pre-activations", z),
                             ("the outputs", y)):
            if values.size and not float(np.max(values)) <= MAX_MAGNITUDE:
                raise NodecastError(f"{what} reach {float(np.max(values)):.3g} over the declared "
                                    f"domain, beyond the {MAX_MAGNITUDE:.0e} this tool accepts (a "
                                    "broken or hostile model)")

    def _check_shapes(self) -> None:
        m, n = self.hidden_weights.shape
        t = self.output_weights.shape[1]
        expected = {
            "hidden_biases": (m,), "output_weights": (m, t), "output_bias": (t,),
            "input_offset": (n,), "input_scale": (n,), "output_offset": (t,),
            "output_scale": (t,), "domain_low": (n,), "domain_high": (n,),
        }
        for name, shape in expected.items():
            if getattr(self, name).shape != shape:
                raise ValueError(f"{name} has shape {getattr(self, name).shape}, expected {shape}")
        counts = {"feature_names": n, "feature_units": n, "target_names": t, "target_units": t}
        for name, count in counts.items():
            if len(getattr(self, name)) != count:
                raise ValueError(f"{name} has {len(getattr(self, name))} entries, expected {count}")
        if np.any(self.input_scale <= 0) or np.any(self.output_scale <= 0):
            raise ValueError("input_scale and output_scale must be positive")
        if np.any(self.domain_low > self.domain_high):
            raise ValueError("domain_low must not exceed domain_high")
        if self.task not in ("regression", "classification"):
            raise ValueError(f"task must be 'regression' or 'classification', got {self.task!r}")
        if self.task == "classification" and t < 2:
            raise ValueError(f"a classifier needs at least two classes, got {t}")
        if self.task == "classification" and len(self.class_labels) != t:
            raise ValueError(f"a classifier needs {t} class labels, got {len(self.class_labels)}")
        if self.task == "regression" and self.class_labels:
            raise ValueError("a regression network has no class labels")

    def _freeze_categorical(self) -> None:
        names = tuple(str(v) for v in self.categorical_names)
        levels = tuple(tuple(str(v) for v in group) for group in self.categorical_levels)
        object.__setattr__(self, "categorical_names", names)
        object.__setattr__(self, "categorical_levels", levels)
        weights = np.zeros((0, self.n_nodes)) if self.level_weights is None else self.level_weights
        object.__setattr__(self, "level_weights", _frozen_array(weights, "level_weights", 2))
        if len(levels) != len(names):
            raise ValueError(f"categorical_levels has {len(levels)} entries, expected {len(names)}")
        total = sum(len(group) for group in levels)
        if self.level_weights.shape != (total, self.n_nodes):
            raise ValueError(f"level_weights has shape {self.level_weights.shape}, expected "
                             f"{(total, self.n_nodes)}")
        taken = set(self.feature_names)
        for name, group in zip(names, levels, strict=True):
            for value in (name, *group):
                if "\x00" in value or value == "" or value.strip() != value:
                    raise NodecastError(f"categorical entry {value!r} is empty, holds a NUL "
                                        "character or starts or ends with white space (CSV "
                                        "cells are read stripped)")
                try:
                    value.encode("utf-8")
                except UnicodeEncodeError:
                    raise NodecastError(f"categorical entry {value!r} is not valid Unicode") from None
            if name in taken or name == "" or name.strip() != name:
                raise NodecastError(f"categorical input name {name!r} is empty, padded with white "
                                    "space, or repeats another input's name")
            taken.add(name)
            if not group or len(set(group)) != len(group):
                raise NodecastError(f"categorical input {name!r} needs at least one level and "
                                    "distinct level texts")

    @property
    def n_categorical(self) -> int:
        return len(self.categorical_names)

    @property
    def n_inputs(self) -> int:
        """Columns of a row of numbers: the numeric features, then one level code per
        categorical input."""
        return self.n_features + self.n_categorical

    def level_start(self, index: int) -> int:
        """Row of ``level_weights`` holding level 0 of categorical input ``index``."""
        return sum(len(group) for group in self.categorical_levels[:index])

    @property
    def n_features(self) -> int:
        return self.hidden_weights.shape[1]

    @property
    def n_nodes(self) -> int:
        return self.hidden_weights.shape[0]

    @property
    def n_outputs(self) -> int:
        return self.output_weights.shape[1]

    def arrays(self) -> dict[str, np.ndarray]:
        """The numeric fields by name (read-only views); ``level_weights`` only when the network
        has categorical inputs."""
        arrays = {name: getattr(self, name) for name in ARRAY_FIELDS}
        if self.n_categorical:
            arrays["level_weights"] = self.level_weights
        return arrays

    def replace(self, **changes) -> Network:
        """A copy with some fields changed (the IR itself never changes)."""
        values = {f.name: getattr(self, f.name) for f in fields(self)}
        if not self.n_categorical and "level_weights" not in changes:
            values["level_weights"] = None  # no levels: sized to whatever node count comes
        values.update(changes)
        return Network(**values)

"""What a fitted scikit-learn Pipeline does to its inputs before the nodecast estimator sees them.

:func:`trace` follows the fitted steps column by column and describes every input column of the
final estimator as an affine function of one raw input column, ``value = raw * mult + add``, where
``raw`` is a numeric feature or, after one-hot encoding, the 0/1 indicator of one level of a
categorical input. Those are exactly the steps nodecast can fold into its own input stage without
changing what the model computes: the scalers (standard, min-max, max-abs), one-hot encoding,
columns passed through or dropped, ColumnTransformers and nested Pipelines of them. Any other step
is refused with one line naming it and what is supported; nothing is ever skipped silently.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.levels import level_text

SUPPORTED = ("StandardScaler, MinMaxScaler, MaxAbsScaler, OneHotEncoder, ColumnTransformer, nested "
             "Pipeline, 'passthrough' and 'drop', then a RandomNodeRegressor or "
             "RandomNodeClassifier as the last step")


@dataclass(frozen=True)
class Column:
    """One input column of the final estimator: ``raw * mult + add``.

    ``source`` names the raw input column; ``level`` is None for a numeric source and otherwise
    the level (text) whose 0/1 indicator ``raw`` is.
    """

    source: str
    mult: float = 1.0
    add: float = 0.0
    level: str | None = None


@dataclass(frozen=True)
class InputStage:
    """The final estimator, its input columns, and the levels of each categorical source."""

    estimator: object
    columns: tuple[Column, ...]
    categories: dict[str, tuple[str, ...]]
    steps: tuple[str, ...]


def refuse(name: str, step, why: str = "") -> NodecastError:
    reason = f" ({why})" if why else ""
    return NodecastError(f"cannot export step {name!r} ({type(step).__name__}){reason}; nodecast "
                         f"compiles {SUPPORTED}")


def trace(obj, names: tuple[str, ...], is_estimator) -> InputStage:
    """Follow ``obj`` (a fitted nodecast estimator or Pipeline) from the raw columns ``names``."""
    from sklearn.pipeline import Pipeline

    columns = tuple(Column(name) for name in names)
    if is_estimator(obj):
        return InputStage(obj, columns, {}, (type(obj).__name__,))
    if not isinstance(obj, Pipeline):
        raise NodecastError(f"cannot export a {type(obj).__name__}: give a fitted RandomNodeRegressor, "
                            "RandomNodeClassifier or a scikit-learn Pipeline ending in one")
    *transforms, (last_name, last) = obj.steps
    if not is_estimator(last):
        raise NodecastError(f"cannot export step {last_name!r} ({type(last).__name__}): the last step "
                            "must be a RandomNodeRegressor or RandomNodeClassifier")
    categories: dict[str, tuple[str, ...]] = {}
    for name, step in transforms:
        columns = apply_step(name, step, columns, categories)
    steps = tuple(f"{name}: {type(step).__name__}" for name, step in obj.steps)
    return InputStage(last, columns, categories, steps)


def apply_step(name: str, step, columns: tuple[Column, ...], categories: dict) -> tuple[Column, ...]:
    """The columns after ``step``; ``categories`` gains the levels of newly one-hot-encoded sources."""
    from sklearn.compose import ColumnTransformer
    from sklearn.pipeline import Pipeline
    from sklearn.preprocessing import FunctionTransformer, OneHotEncoder

    if step is None or (isinstance(step, str) and step == "passthrough"):
        return columns
    if isinstance(step, Pipeline):
        for inner_name, inner in step.steps:
            columns = apply_step(f"{name}.{inner_name}", inner, columns, categories)
        return columns
    if isinstance(step, ColumnTransformer):
        return _column_transformer(name, step, columns, categories)
    if isinstance(step, OneHotEncoder):
        return _one_hot(name, step, columns, categories)
    if isinstance(step, FunctionTransformer) and step.func is None:  # identity (the remainder)
        return columns
    return _scaled(name, step, columns)


def _scaler_affine(name: str, step) -> tuple[np.ndarray, np.ndarray]:
    """(mult, add) per column with ``out = in * mult + add`` for the supported scalers."""
    from sklearn.preprocessing import MaxAbsScaler, MinMaxScaler, StandardScaler

    if isinstance(step, StandardScaler):
        n = step.n_features_in_
        mean = step.mean_ if step.with_mean else np.zeros(n)
        scale = step.scale_ if step.with_std else np.ones(n)
        return 1.0 / scale, -mean / scale
    if isinstance(step, MinMaxScaler):
        if step.clip:
            raise refuse(name, step, "clip=True clips to the training range, which nodecast "
                         "expresses as the declared domain with --out-of-domain clamp instead")
        return step.scale_, step.min_
    if isinstance(step, MaxAbsScaler):
        return 1.0 / step.scale_, np.zeros(step.n_features_in_)
    raise refuse(name, step)


def _scaled(name: str, step, columns: tuple[Column, ...]) -> tuple[Column, ...]:
    try:
        mult, add = _scaler_affine(name, step)
    except AttributeError:
        raise refuse(name, step, "not fitted") from None
    if len(mult) != len(columns):
        raise refuse(name, step, f"fitted on {len(mult)} columns, receives {len(columns)}")
    out = []
    for column, m, a in zip(columns, mult, add, strict=True):
        if not (np.isfinite(m) and m > 0 and np.isfinite(a)):
            raise refuse(name, step, f"its scale for {column.source!r} is not a finite positive "
                         "number")
        out.append(replace(column, mult=column.mult * float(m), add=column.add * float(m) + float(a)))
    return tuple(out)


def _column_transformer(name: str, step, columns: tuple[Column, ...], categories: dict):
    indices = getattr(step, "_transformer_to_input_indices", None)
    slices = getattr(step, "output_indices_", None)
    if indices is None or slices is None:
        raise refuse(name, step, "not fitted, or a scikit-learn version without output_indices_")
    parts = []
    for inner_name, inner, _ in step.transformers_:
        chosen = tuple(columns[i] for i in indices[inner_name])
        if isinstance(inner, str) and inner == "drop" or not chosen:
            continue
        inner_step = None if isinstance(inner, str) and inner == "passthrough" else inner
        out = apply_step(f"{name}.{inner_name}", inner_step, chosen, categories)
        parts.append((slices[inner_name].start, out))
    return tuple(column for _, out in sorted(parts, key=lambda part: part[0]) for column in out)


def _one_hot(name: str, step, columns: tuple[Column, ...], categories: dict):
    if getattr(step, "categories_", None) is None:
        raise refuse(name, step, "not fitted")
    if len(step.categories_) != len(columns):
        raise refuse(name, step, f"fitted on {len(step.categories_)} columns, receives "
                     f"{len(columns)}")
    if getattr(step, "_infrequent_enabled", False):
        raise refuse(name, step, "infrequent-category grouping (min_frequency, max_categories) "
                     "is not supported")
    dropped = getattr(step, "drop_idx_", None)
    out = []
    for i, (column, levels) in enumerate(zip(columns, step.categories_, strict=True)):
        if column.level is not None or column.mult != 1.0 or column.add != 0.0:
            raise refuse(name, step, f"column {column.source!r} is scaled or encoded before; "
                         "one-hot encoding takes raw columns only")
        texts = tuple(level_text(value) for value in levels)
        if len(set(texts)) != len(texts):
            raise refuse(name, step, f"two levels of {column.source!r} have the same text")
        if column.source in categories:
            raise refuse(name, step, f"column {column.source!r} is one-hot encoded twice")
        categories[column.source] = texts
        drop = None if dropped is None or dropped[i] is None else int(dropped[i])
        out += [Column(column.source, level=text) for k, text in enumerate(texts) if k != drop]
    return tuple(out)

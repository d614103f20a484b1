"""From a fitted estimator or Pipeline to the IR plus its metadata record, and on to an artifact.

:func:`to_bundle` and :func:`export` are the one documented Python path (docs/python-api.md). A
Pipeline's input steps are folded into the network's input stage (:mod:`nodecast.trainer.input_stage`):
a raw feature ``x`` that reaches the estimator as ``x * mult + add`` and is normalised there by
``(. - offset) / scale`` becomes the IR's ``(x - (offset - add) / mult) / (scale / mult)`` with the
estimator's hidden weights unchanged; its domain is mapped back the same way.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from sklearn.utils.validation import check_is_fitted

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.trainer.estimators import RandomNodeClassifier, RandomNodeRegressor
from nodecast.trainer.input_stage import InputStage, trace


def _is_estimator(obj) -> bool:
    return isinstance(obj, (RandomNodeRegressor, RandomNodeClassifier))


def to_bundle(obj, feature_names: Sequence[str] | None = None,
              target_names: Sequence[str] | None = None,
              feature_units: Sequence[str] | Mapping[str, str] = (),
              target_units: Sequence[str] | Mapping[str, str] = (),
              domain: Mapping[str, tuple[float, float]] | None = None,
              metadata: dict[str, Any] | None = None) -> Bundle:
    """Bundle a fitted :class:`RandomNodeRegressor`, :class:`RandomNodeClassifier`, or a fitted
    scikit-learn ``Pipeline`` whose input steps nodecast can compile, ending in one of them.

    Parameters
    ----------
    obj : the fitted estimator or Pipeline.
    feature_names : the raw input columns, default ``obj.feature_names_in_`` (fitted on a
        DataFrame), else ``x0, x1, ..``. Columns a Pipeline drops are not inputs of the bundle.
    target_names : default the target's name is ``y0, y1, ..``; classifiers: the label text.
    feature_units, target_units : a sequence (one per name) or a mapping name -> unit.
    domain : mapping feature name -> (low, high) in raw units, replacing the domain the fit
        recorded (default: the training data's range, mapped back through the Pipeline's scalers).
    metadata : extra JSON-safe records for the bundle.

    Raises NodecastError, naming the step, for anything that cannot be compiled exactly.
    """
    check_is_fitted(obj)
    names = _raw_names(obj, feature_names)
    return stage_to_bundle(trace(obj, names, _is_estimator), names, target_names, feature_units,
                           target_units, domain, metadata)


def stage_to_bundle(stage: InputStage, names: tuple[str, ...], target_names=None, feature_units=(),
                    target_units=(), domain=None, metadata=None) -> Bundle:
    """The bundle of a traced input stage (see :func:`to_bundle`); ``names`` are the raw columns
    in their order."""
    estimator = stage.estimator
    check_is_fitted(estimator)
    if len(stage.columns) != estimator.n_features_in_:
        raise NodecastError(f"the input steps give {len(stage.columns)} columns but the estimator "
                            f"was fitted on {estimator.n_features_in_}")
    is_classifier = isinstance(estimator, RandomNodeClassifier)
    labels = tuple(str(label) for label in estimator.classes_) if is_classifier else ()
    t = estimator.coef_.shape[1]
    if target_names is None:
        target_names = labels if is_classifier else tuple(f"y{i}" for i in range(t))
    inputs = _folded_inputs(stage, names)
    inputs["domain_low"], inputs["domain_high"] = _declared_domain(inputs, domain)
    network = Network(
        activation=estimator.activation, output_weights=estimator.coef_,
        output_bias=estimator.intercept_, output_offset=estimator.output_offset_,
        output_scale=estimator.output_scale_, target_names=tuple(target_names),
        feature_units=_per_name(feature_units, inputs["feature_names"], "feature_units"),
        target_units=_per_name(target_units, tuple(target_names), "target_units"),
        task="classification" if is_classifier else "regression", class_labels=labels, **inputs)
    record = _training_record(estimator)
    if len(stage.steps) > 1:
        record["pipeline"] = list(stage.steps)
    record.update(metadata or {})
    return Bundle(network=network, metadata=record)


def export(obj, to: str, path=None, overwrite: bool = False, *,
           feature_names: Sequence[str] | None = None, target_names: Sequence[str] | None = None,
           feature_units: Sequence[str] | Mapping[str, str] = (),
           target_units: Sequence[str] | Mapping[str, str] = (),
           domain: Mapping[str, tuple[float, float]] | None = None,
           metadata: dict[str, Any] | None = None, **options):
    """Compile ``obj`` (a Bundle, or anything :func:`to_bundle` takes) for target ``to`` ("onnx",
    "c" or "python") and write it to ``path`` if given; return the Artifact.

    ``options`` go to :func:`nodecast.compiler.emit` (``precision``, ``out_of_domain``, ``prefix``,
    ..., as the ``emit`` command's options). Nothing is written when the object or an option is
    refused.
    """
    from nodecast.compiler import emit

    if isinstance(obj, Bundle):
        given = [feature_names, target_names, domain, metadata]
        if any(value is not None for value in given) or feature_units or target_units:
            raise NodecastError("names, units, domain and metadata are part of a bundle already; "
                                "give them to to_bundle, or pass the estimator or Pipeline here")
        bundle = obj
    else:
        bundle = to_bundle(obj, feature_names, target_names, feature_units, target_units, domain,
                           metadata)
    return emit(bundle, to, path, overwrite=overwrite, **options)


def _raw_names(obj, feature_names) -> tuple[str, ...]:
    n = obj.n_features_in_
    if feature_names is None:
        fitted = getattr(obj, "feature_names_in_", None)
        return tuple(str(v) for v in fitted) if fitted is not None else tuple(f"x{i}" for i in range(n))
    names = tuple(str(v) for v in feature_names)
    if len(names) != n:
        raise NodecastError(f"feature_names has {len(names)} entries; the fitted object takes {n} "
                            "columns")
    return names


def _folded_inputs(stage: InputStage, names: tuple[str, ...]) -> dict:
    """The IR's input-stage fields: numeric raw features, then categorical ones, each in their
    order among ``names``."""
    est, columns = stage.estimator, stage.columns
    numeric = sorted((j for j, column in enumerate(columns) if column.level is None),
                     key=lambda j: names.index(columns[j].source))
    sources = [columns[j].source for j in numeric]
    both = sorted(set(sources) & set(stage.categories))
    if both:
        raise NodecastError(f"raw column {both[0]!r} is both a number and one-hot encoded; "
                            "nodecast folds each raw column into one input")
    repeated = sorted({s for s in sources if sources.count(s) > 1})
    if repeated and len(stage.steps) > 1:  # a Pipeline's doing; else the names repeat (IR refuses)
        raise NodecastError(f"raw column {repeated[0]!r} feeds more than one estimator input; "
                            "nodecast folds each raw column into one input")
    mult = np.array([columns[j].mult for j in numeric])
    add = np.array([columns[j].add for j in numeric])
    low = (est.domain_low_[numeric] - add) / mult
    high = (est.domain_high_[numeric] - add) / mult
    biases, categorical = _folded_levels(stage, names)
    return {"feature_names": tuple(sources), "hidden_weights": est.hidden_weights_[:, numeric],
            "hidden_biases": biases, **categorical,
            "input_offset": (est.input_offset_[numeric] - add) / mult,
            "input_scale": est.input_scale_[numeric] / mult,
            "domain_low": np.minimum(low, high), "domain_high": np.maximum(low, high)}


def _folded_levels(stage: InputStage, names: tuple[str, ...]) -> tuple[np.ndarray, dict]:
    """Hidden biases and the categorical fields: the estimator column j of level l, reaching it as
    ``e * mult + add`` (e the level's 0/1 indicator) and normalised by ``(. - offset) / scale``,
    adds ``a_j * mult / scale`` to level l's vector and ``a_j * (add - offset) / scale`` to the
    biases (nothing at all when mult = scale = 1 and add = offset = 0, the usual case)."""
    est = stage.estimator
    biases = np.array(est.hidden_biases_, dtype=np.float64)
    order = sorted(stage.categories, key=names.index)
    if not order:
        return biases, {}
    rows = {(source, level): k for k, (source, level) in enumerate(
        (source, level) for source in order for level in stage.categories[source])}
    vectors = np.zeros((len(rows), biases.size))
    for j, column in enumerate(stage.columns):
        if column.level is None:
            continue
        weights = est.hidden_weights_[:, j]
        offset, scale = est.input_offset_[j], est.input_scale_[j]
        vectors[rows[column.source, column.level]] += weights * (column.mult / scale)
        if column.add != offset:
            biases += weights * ((column.add - offset) / scale)
    return biases, {"categorical_names": tuple(order), "level_weights": vectors,
                    "categorical_levels": tuple(stage.categories[source] for source in order)}


def _declared_domain(inputs: dict, domain) -> tuple[np.ndarray, np.ndarray]:
    low, high = inputs["domain_low"].copy(), inputs["domain_high"].copy()
    names = inputs["feature_names"]
    for name, bounds in (domain or {}).items():
        if name not in names:
            raise NodecastError(f"domain names {name!r}, which is not an input; inputs: "
                                f"{', '.join(names)}")
        lo, hi = (float(v) for v in bounds)
        if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
            raise NodecastError(f"domain {name}=({lo!r}, {hi!r}): bounds must be finite with "
                                "low <= high")
        low[names.index(name)], high[names.index(name)] = lo, hi
    return low, high


def _per_name(values, names: tuple[str, ...], what: str) -> tuple[str, ...]:
    if isinstance(values, Mapping):
        unknown = sorted(set(values) - set(names))
        if unknown:
            raise NodecastError(f"{what} names {unknown[0]!r}, which is not one of {', '.join(names)}")
        return tuple(str(values.get(name, "")) for name in names)
    values = tuple(str(v) for v in values)
    if values and len(values) != len(names):
        raise NodecastError(f"{what} has {len(values)} entries, expected {len(names)} (or a "
                            "mapping name -> unit)")
    return values


def _training_record(estimator) -> dict:
    record = {
        "settings": {key: _plain(value) for key, value in sorted(estimator.get_params().items())},
        "diagnostics": {key: _plain(value) for key, value in sorted(estimator.diagnostics_.items())},
    }
    record.update(_training_ranges(estimator))
    if hasattr(estimator, "ridge_"):
        record["ridge"] = {**_plain_record(getattr(estimator, "ridge_choice_", {})),
                           "value": float(estimator.ridge_)}
    if getattr(estimator, "layer_choice_", {"rule": "given"}).get("rule") != "given":
        record["layer_choice"] = _plain_record(estimator.layer_choice_)
    return record


def _training_ranges(estimator) -> dict:
    """Each node's pre-activation range over the training rows, as the fit recorded it; nothing
    when the estimator's layer was replaced after the fit (the recorded ranges would not match)."""
    low, high = getattr(estimator, "training_z_low_", None), getattr(estimator, "training_z_high_", None)
    m = estimator.hidden_weights_.shape[0]
    if low is None or high is None or np.shape(low) != (m,) or np.shape(high) != (m,):
        return {}
    return {"node_ranges": {"training_z_low": [float(v) for v in low],
                            "training_z_high": [float(v) for v in high]}}


def _plain_record(record: dict) -> dict:
    return {str(key): _plain(value) for key, value in sorted(record.items())}


def _plain(value):
    """A JSON-safe copy of a parameter value (arrays become lists)."""
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, (np.ndarray, tuple, list)):
        return [_plain(v) for v in value]
    if isinstance(value, dict):
        return _plain_record(value)
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return repr(value)

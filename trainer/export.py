"""The one function that turns a fitted estimator into the IR plus its metadata record."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from sklearn.utils.validation import check_is_fitted

from nodecast.compiler.bundle import Bundle
from nodecast.compiler.ir import Network
from nodecast.trainer.estimators import RandomNodeClassifier


def to_bundle(estimator, feature_names: Sequence[str] | None = None,
              target_names: Sequence[str] | None = None, feature_units: Sequence[str] = (),
              target_units: Sequence[str] = (), metadata: dict[str, Any] | None = None) -> Bundle:
    """Bundle a fitted :class:`RandomNodeRegressor` or :class:`RandomNodeClassifier`.

    Classifiers get one output per class, named by ``target_names`` (default: the label text).
    """
    check_is_fitted(estimator)
    n = estimator.n_features_in_
    is_classifier = isinstance(estimator, RandomNodeClassifier)
    labels = tuple(str(label) for label in estimator.classes_) if is_classifier else ()
    t = estimator.coef_.shape[1]
    network = Network(
        hidden_weights=estimator.hidden_weights_, hidden_biases=estimator.hidden_biases_,
        activation=estimator.activation, output_weights=estimator.coef_,
        output_bias=estimator.intercept_, input_offset=estimator.input_offset_,
        input_scale=estimator.input_scale_, output_offset=estimator.output_offset_,
        output_scale=estimator.output_scale_, domain_low=estimator.domain_low_,
        domain_high=estimator.domain_high_,
        feature_names=tuple(feature_names) if feature_names is not None else
        tuple(f"x{i}" for i in range(n)),
        target_names=tuple(target_names) if target_names is not None else
        (labels if is_classifier else tuple(f"y{i}" for i in range(t))),
        feature_units=tuple(feature_units), target_units=tuple(target_units),
        task="classification" if is_classifier else "regression", class_labels=labels)
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
    record.update(metadata or {})
    return Bundle(network=network, metadata=record)


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

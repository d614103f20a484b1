"""``nodecast diff``: how far a retrained model's behaviour moves from the model it replaces.

Both models are compared with their float64 references. First the declared domains: a difference
is reported before anything else (the inputs a rejecting artifact accepts have changed), and the
outputs are compared on the box both models declare. Then, per output, the largest change
|new(x) - old(x)| over that box, found by the seeded adversarial search of the certified-bound
work (:func:`nodecast.compiler.bounds.search.find_worst`): a value the models really take at
the reported input, so a lower bound of the true largest change, never more. With ``data``, the
change on those rows too, and with labelled rows the metrics of both models and their difference.
``max_change`` makes it a gate: the report fails when a change exceeds its limit or the domain
changed.

Report schema (``as_dict``; also what ``diff --report`` writes): ``passed``, ``gated``, ``task``,
``old`` and ``new`` (``bundle_id``), ``features``, ``outputs`` (``names``, ``units``), ``domain``
(``same``, ``old``, ``new``, ``compared``: [low, high] per feature; ``differences``: text),
``search`` (``seed``, ``samples``, ``evaluations``, ``per_output``: ``name``,
``max_abs_change``, ``at``, ``old``, ``new``), ``data`` (null or ``source``, ``rows``,
``rows_outside_domain``, ``per_output``: ``name``, ``max_abs_change``, ``mean_abs_change``,
``at_row``; ``labels_changed`` for classifiers; ``metrics``: null or ``old``, ``new``, ``delta``),
``gates`` (``name``, ``value``, ``limit``, ``passed``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler import reference
from nodecast.compiler.bounds.search import find_worst
from nodecast.compiler.errors import NodecastError


@dataclass(frozen=True)
class DiffReport:
    passed: bool
    document: dict

    def as_dict(self) -> dict:
        return self.document


def check_comparable(old, new) -> None:
    """Refuse models that do not answer the same question (inputs, outputs, task, classes)."""
    if old.task != new.task:
        raise NodecastError(f"the old model is a {old.task} model, the new one a {new.task} model")
    if old.feature_names != new.feature_names:
        raise NodecastError(f"the models read different inputs: {list(old.feature_names)} (old) "
                            f"and {list(new.feature_names)} (new); compare models of the same "
                            "features in the same order")
    if old.target_names != new.target_names:
        what = "classes" if old.task == "classification" else "outputs"
        raise NodecastError(f"the models have different {what}: {list(old.target_names)} (old) "
                            f"and {list(new.target_names)} (new)")


def compare_domains(old, new) -> dict:
    low = np.maximum(old.domain_low, new.domain_low)
    high = np.minimum(old.domain_high, new.domain_high)
    differences = [f"{name}: {float(old.domain_low[i])!r} .. {float(old.domain_high[i])!r} -> "
                   f"{float(new.domain_low[i])!r} .. {float(new.domain_high[i])!r}"
                   for i, name in enumerate(old.feature_names)
                   if old.domain_low[i] != new.domain_low[i] or old.domain_high[i] != new.domain_high[i]]
    apart = [name for i, name in enumerate(old.feature_names) if low[i] > high[i]]
    if apart:
        raise NodecastError(f"the declared domains do not overlap in {', '.join(map(repr, apart))}; "
                            "there is no input both models are meant for")
    box = lambda lo, hi: [[float(a), float(b)] for a, b in zip(lo, hi, strict=True)]  # noqa: E731
    return {"same": not differences, "differences": differences,
            "old": box(old.domain_low, old.domain_high), "new": box(new.domain_low, new.domain_high),
            "compared": box(low, high)}


def search_changes(old, new, low, high, seed: int, samples: int) -> dict:
    def change(X):
        return np.abs(reference.predict(new, X) - reference.predict(old, X))

    found = find_worst(change, low, high, seed=seed, random_points=samples)
    per_output = []
    for j, name in enumerate(old.target_names):
        at = found.inputs[j][None, :]
        per_output.append({"name": name, "max_abs_change": float(found.values[j]),
                           "at": [float(v) for v in found.inputs[j]],
                           "old": float(reference.predict(old, at)[0, j]),
                           "new": float(reference.predict(new, at)[0, j])})
    return {"seed": seed, "samples": samples, "evaluations": int(found.evaluations),
            "per_output": per_output}


def data_changes(old_bundle, new_bundle, table) -> dict:
    from nodecast.compiler.scoring import evaluate

    old, new = old_bundle.network, new_bundle.network
    X = table.numbers(old.feature_names)
    if X.shape[0] == 0:
        raise NodecastError(f"{table.source}: no data rows to compare the models on")
    if not np.all(np.isfinite(X)):
        raise NodecastError(f"{table.source}: feature columns must hold finite numbers")
    delta = np.abs(reference.predict(new, X) - reference.predict(old, X))
    record = {"source": table.source, "rows": int(X.shape[0]),
              "rows_outside_domain": int((reference.outside_domain(old, X)
                                          | reference.outside_domain(new, X)).sum()),
              "per_output": [{"name": name, "max_abs_change": float(delta[:, j].max()),
                              "mean_abs_change": float(delta[:, j].mean()),
                              "at_row": int(np.argmax(delta[:, j])) + 1}
                             for j, name in enumerate(old.target_names)]}
    if old.task == "classification":
        record["labels_changed"] = int(np.sum(reference.predict_labels(old, X)
                                              != reference.predict_labels(new, X)))
    record["metrics"] = None
    if _labelled(old_bundle, table):
        before, after = evaluate(old_bundle, table), evaluate(new_bundle, table)
        record["metrics"] = {"old": before, "new": after, "delta": _metric_delta(before, after)}
    return record


def _labelled(bundle, table) -> bool:
    from nodecast.compiler.scoring import label_column

    net = bundle.network
    if net.task == "classification":
        try:
            return label_column(bundle) in table.header
        except NodecastError:
            return False
    return all(name in table.header for name in net.target_names)


def _metric_delta(before: dict, after: dict) -> dict:
    if "accuracy" in before:
        return {"accuracy": after["accuracy"] - before["accuracy"]}
    return {t_new["name"]: {key: t_new[key] - t_old[key] for key in ("rmse", "mae", "max_error", "r2")}
            for t_old, t_new in zip(before["targets"], after["targets"], strict=True)}


def _gates(document: dict, max_change) -> list[dict]:
    if max_change is None:
        return []
    names = document["outputs"]["names"]
    if len(max_change) not in (1, len(names)):
        raise NodecastError(f"--max-change takes one limit or one per output ({len(names)}), "
                            f"got {len(max_change)}")
    limits = list(max_change) * (len(names) if len(max_change) == 1 else 1)
    gates = [{"name": "domain", "value": len(document["domain"]["differences"]), "limit": 0,
              "passed": document["domain"]["same"]}]
    data = document["data"]
    for j, name in enumerate(names):
        value = document["search"]["per_output"][j]["max_abs_change"]
        if data is not None:
            value = max(value, data["per_output"][j]["max_abs_change"])
        gates.append({"name": f"max-change:{name}", "value": value, "limit": limits[j],
                      "passed": bool(value <= limits[j])})
    return gates


def diff(old_bundle, new_bundle, table=None, max_change=None, seed: int = 0,
         samples: int = 20000) -> DiffReport:
    """Compare ``new_bundle`` with ``old_bundle`` (module doc); ``table`` a csvio Table or None;
    ``max_change`` None or a sequence of limits (one, or one per output) in target units."""
    old, new = old_bundle.network, new_bundle.network
    check_comparable(old, new)
    if max_change is not None and any(not (v >= 0) for v in max_change):
        raise NodecastError("--max-change limits must be numbers >= 0")
    domain = compare_domains(old, new)
    low, high = (np.array(side) for side in zip(*domain["compared"], strict=True))
    data = None if table is None else data_changes(old_bundle, new_bundle, table)
    document = {
        "task": old.task, "old": {"bundle_id": old_bundle.bundle_id},
        "new": {"bundle_id": new_bundle.bundle_id}, "features": list(old.feature_names),
        "outputs": {"names": list(old.target_names), "units": list(new.target_units)},
        "domain": domain, "search": search_changes(old, new, low, high, seed, samples),
        "data": data}
    gates = _gates(document, max_change)
    passed = all(g["passed"] for g in gates)
    document = {"passed": passed, "gated": bool(gates), **document, "gates": gates}
    return DiffReport(passed, document)

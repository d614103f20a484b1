"""Reports of ``verify`` and ``score``: a terminal table, JSON, and JUnit XML for CI servers.

JSON: the report document as is, keys sorted, two-space indent; an infinite error (an artifact that
returned NaN or infinity where the reference is finite) is written as the string "inf", so the file
stays strict JSON. JUnit: the layout CI servers commonly read (common practice, as written by Ant's
JUnit task and read by Jenkins, GitLab and others): a ``<testsuites>`` root with ``tests``,
``failures`` and ``errors`` totals; one ``<testsuite>`` per run with ``name``, ``tests``,
``failures``, ``errors``, ``skipped``, a ``<properties>`` block and ``<system-out>`` holding the
terminal table; one ``<testcase classname=.. name=..>`` per probe family (``verify``) or per gate
(``score``), a failed one holding ``<failure message=.. type=..>`` with the details. Reports hold no
times or dates, so the same run gives the same bytes.
"""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET

_XML_INVALID = re.compile("[^\t\n\r\x20-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def _strict(value):
    """A copy of ``value`` with non-finite floats as strings, so json.dumps stays strict JSON."""
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, dict):
        return {str(k): _strict(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_strict(v) for v in value]
    return value


def to_json(document: dict) -> str:
    return json.dumps(_strict(document), indent=2, sort_keys=True, allow_nan=False) + "\n"


def _number(value, spec: str = ".3e") -> str:
    return value if isinstance(value, str) else format(value, spec)


def _vector(values) -> str:
    return "" if values is None else "[" + ", ".join(f"{v:.6g}" for v in values) + "]"


def _labels_cell(result: dict) -> str:
    labels = result.get("labels")
    if labels is None:
        return ""
    return f"{labels['disagreements']}/{labels['near_tie_flips']}/{labels['near_ties']}"


def format_table(report) -> str:
    """The terminal table of a verify report: one line per runtime engine and probe family."""
    doc = report.as_dict() if hasattr(report, "as_dict") else report
    art = doc["artifact"]
    is_classifier = doc.get("task") == "classification"
    probes = doc["probes"]
    lines = [f"verify {art['kind']} {art['precision']} (out-of-domain {art['out_of_domain']}) "
             f"against bundle {doc['bundle_id'][:12]}: {probes['total']} probes, "
             f"seed {probes['seed']}",
             f"{'engine':<15} {'family':<13} {'count':>6} {'max abs err':>12} {'max rel err':>12}"
             "  ok  " + ("labels bad/flip/tie  " if is_classifier else "") + "worst input"]
    for r in doc["families"]:
        labels = f"{_labels_cell(r):<19}  " if is_classifier else ""
        if r.get("compared", r["count"]) == 0:  # nothing evaluated: say what happened instead
            errors, worst = f"{'-':>12} {'-':>12}", _rejected_text(r)
        else:
            errors = f"{_number(r['max_abs_error']):>12} {_number(r['max_rel_error']):>12}"
            worst = _vector(r["worst_input"])
        lines.append(f"{r['engine']:<15} {r['family']:<13} {r['count']:>6} {errors}  "
                     f"{'yes' if r['passed'] else 'NO ':<3} {labels}{worst}")
        if r["policy_violation"]:
            lines.append(f"    policy {r['policy']!r} not honoured: {r['policy_violation']}")
        if r.get("labels", {}).get("label_outputs_wrong"):
            lines.append(f"    {r['labels']['label_outputs_wrong']} label output(s) are not the "
                         "class of the artifact's own highest score")
    tol, budget = doc["tolerance"], doc["accuracy_budget"]
    for name, unit, t, b, limit, measured in zip(
            doc["outputs"]["names"], doc["outputs"]["units"], tol["per_output"],
            tol["certified_bound"], budget["per_output"], doc["measured_max_abs_error"], strict=True):
        lines.append(f"{name}: measured {measured:.3e}, certified bound {b:.3e} (tolerance "
                     f"{t:.3e} with the reference's rounding), budget "
                     f"{'none' if limit is None else format(limit, '.3e')} {unit}".rstrip()
                     + f" ({budget['rule']})")
    lines += [f"note: {note}" for note in doc.get("notes", [])]
    verdict = "PASSED" if doc["passed"] else "FAILED"
    reason = ("" if doc["passed"] else " (soundness)" if not doc["sound"]
              else " (bound above the accuracy budget)" if not doc["within_budget"] else "")
    lines.append(f"verification {verdict}{reason}: {art['kind']} "
                 f"{art['precision']}, max abs error {_number(doc['max_abs_error'])}, "
                 f"certified bound {max(tol['certified_bound']):.3e}")
    return "\n".join(lines)


def _rejected_text(result: dict) -> str:
    """The worst-input cell of a family with no row compared (every row rejected)."""
    rejected, count = result.get("rejected", 0), result["count"]
    if result["policy"] == "reject" and result["policy_honoured"]:
        return f"{rejected} of {count} rows rejected, as the reject policy requires"
    return f"{rejected} of {count} rows rejected, none compared"


def _family_failure(result: dict, names) -> str | None:
    if result["passed"]:
        return None
    parts = []
    if result["policy_violation"]:
        parts.append(f"policy {result['policy']!r} not honoured: {result['policy_violation']}")
    if not result["within_tolerance"]:
        k = result["worst_output"]
        parts.append(f"max abs error {_number(result['max_abs_error'])} exceeds the tolerance "
                     f"{result['tolerance'][k]:.3e} of output {names[k]!r} at input "
                     f"{_vector(result['worst_input'])}")
    if result.get("labels", {}).get("disagreements"):
        parts.append(f"{result['labels']['disagreements']} label(s) differ away from near-ties")
    if result.get("labels", {}).get("label_outputs_wrong"):
        parts.append(f"{result['labels']['label_outputs_wrong']} label output(s) are not the "
                     "class of the artifact's own highest score")
    return "; ".join(parts)


def verify_junit(document: dict) -> str:
    """JUnit XML of a verify report: one suite per runtime engine, one case per probe family."""
    art, suites = document["artifact"], []
    props = {"bundle_id": document["bundle_id"], "kind": art["kind"], "precision": art["precision"],
             "out_of_domain": art["out_of_domain"], "seed": document["probes"]["seed"],
             "tolerance_rule": document["tolerance"]["rule"],
             "certified_bound": json.dumps(document["certified_bound"]),
             "accuracy_budget": json.dumps(_strict(document["accuracy_budget"]["per_output"]))}
    table = format_table(document)
    for engine in art["engines"]:
        name = f"nodecast.verify.{art['kind']}.{engine}"
        cases = [{"classname": name, "name": r["family"],
                  "failure": _family_failure(r, document["outputs"]["names"])}
                 for r in document["families"] if r["engine"] == engine]
        if not document["within_budget"] and cases:
            cases.append({"classname": name, "name": "accuracy-budget",
                          "failure": "; ".join(n for n in document["notes"]
                                               if n.startswith("accuracy"))})
        suites.append({"name": name, "cases": cases, "properties": {**props, "engine": engine},
                       "system_out": table})
    return junit_xml("nodecast verify", suites)


def junit_xml(name: str, suites: list[dict]) -> str:
    """Serialise suites ({"name", "cases": [{"classname", "name", "failure": str|None}],
    "properties": dict, "system_out": str}) as JUnit XML text."""
    failures = sum(1 for s in suites for c in s["cases"] if c["failure"])
    total = sum(len(s["cases"]) for s in suites)
    root = ET.Element("testsuites", name=_clean(name), tests=str(total), failures=str(failures),
                      errors="0")
    for suite in suites:
        failed = sum(1 for c in suite["cases"] if c["failure"])
        node = ET.SubElement(root, "testsuite", name=_clean(suite["name"]),
                             tests=str(len(suite["cases"])), failures=str(failed), errors="0",
                             skipped="0")
        props = ET.SubElement(node, "properties")
        for key, value in suite["properties"].items():
            ET.SubElement(props, "property", name=_clean(key), value=_clean(value))
        for case in suite["cases"]:
            element = ET.SubElement(node, "testcase", classname=_clean(case["classname"]),
                                    name=_clean(case["name"]))
            if case["failure"]:
                failure = ET.SubElement(element, "failure", message=_clean(case["failure"]),
                                        type="nodecast.gate")
                failure.text = _clean(case["failure"])
        ET.SubElement(node, "system-out").text = _clean(suite["system_out"])
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def _clean(value) -> str:
    """Text XML 1.0 can hold: characters it forbids (most control characters) become U+FFFD."""
    return _XML_INVALID.sub("\ufffd", str(value))


def _regression_lines(metrics: dict) -> list[str]:
    lines = [f"{'target':<20} {'RMSE':>11} {'MAE':>11} {'max error':>11} {'R^2':>9}"]
    for t in metrics["targets"]:
        lines.append(f"{t['name'][:20]:<20} {t['rmse']:>11.5g} {t['mae']:>11.5g} "
                     f"{t['max_error']:>11.5g} {t['r2']:>9.5f}")
    return lines


def _classification_lines(metrics: dict) -> list[str]:
    labels, matrix = metrics["confusion"]["labels"], metrics["confusion"]["matrix"]
    width = max(8, *(min(16, len(label)) for label in labels))
    lines = [f"accuracy {metrics['accuracy']:.4f}",
             "confusion (rows: true label, columns: predicted)",
             " " * (width + 1) + " ".join(f"{label[:width]:>{width}}" for label in labels)]
    for label, row in zip(labels, matrix, strict=True):
        lines.append(f"{label[:width]:<{width}} " + " ".join(f"{n:>{width}}" for n in row))
    return lines


def format_score_table(report) -> str:
    """The terminal table of a score report: metrics, the baseline's, and each gate."""
    doc = report.as_dict() if hasattr(report, "as_dict") else report
    lines = [f"score bundle {doc['bundle_id'][:12]} ({doc['task']}) on {doc['rows']} rows "
             f"({doc['rows_outside_domain']} outside the declared domain)"]
    describe = _classification_lines if doc["task"] == "classification" else _regression_lines
    lines += describe(doc["metrics"])
    if doc["baseline"]:
        lines.append(f"baseline bundle {doc['baseline']['bundle_id'][:12]}:")
        lines += ["  " + line for line in describe(doc["baseline"]["metrics"])]
    for gate in doc["gates"]:
        lines.append(f"gate {gate['name']}: {gate['value']:.6g} vs limit {gate['limit']:.6g} "
                     f"({gate['rule']}) {'passed' if gate['passed'] else 'FAILED'}")
    if not doc["gates"]:
        lines.append("no gates asked for (--max-rmse, --min-accuracy, --baseline)")
    lines.append(f"score {'PASSED' if doc['passed'] else 'FAILED'}")
    return "\n".join(lines)


def score_junit(document: dict) -> str:
    """JUnit XML of a score report: one suite, one case per gate (or one "metrics" case)."""
    name = "nodecast.score"
    cases = [{"classname": name, "name": gate["name"],
              "failure": None if gate["passed"] else
              f"{gate['value']:.6g} fails {gate['rule']} (limit {gate['limit']:.6g})"}
             for gate in document["gates"]] or [{"classname": name, "name": "metrics",
                                                 "failure": None}]
    props = {"bundle_id": document["bundle_id"], "task": document["task"],
             "rows": document["rows"]}
    if document["baseline"]:
        props["baseline_bundle_id"] = document["baseline"]["bundle_id"]
    suite = {"name": name, "cases": cases, "properties": props,
             "system_out": format_score_table(document)}
    return junit_xml("nodecast score", [suite])

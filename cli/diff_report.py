"""Reports of ``nodecast diff``: the terminal table and JUnit XML (JSON is the document itself,
written by :func:`nodecast.compiler.verify.report.to_json`)."""

from __future__ import annotations

from nodecast.compiler.verify.report import junit_xml


def _point(values) -> str:
    return "[" + ", ".join(f"{v:.6g}" for v in values) + "]"


def _amount(value: float, unit: str) -> str:
    return f"{value:.4g} {unit}" if unit else f"{value:.4g}"


def _data_lines(data: dict, units) -> list[str]:
    lines = [f"change on {data['source']} ({data['rows']} rows, {data['rows_outside_domain']} "
             "outside a declared domain):"]
    for record, unit in zip(data["per_output"], units, strict=True):
        lines.append(f"  {record['name']}: max {_amount(record['max_abs_change'], unit)} (data row "
                     f"{record['at_row']}), mean {_amount(record['mean_abs_change'], unit)}")
    if "labels_changed" in data:
        lines.append(f"  predicted label changed on {data['labels_changed']} of {data['rows']} rows")
    metrics = data["metrics"]
    if metrics is None:
        lines.append("  (no target columns in the data: no accuracy comparison)")
    elif "accuracy" in metrics["delta"]:
        lines.append(f"  accuracy {metrics['old']['accuracy']:.4f} -> {metrics['new']['accuracy']:.4f} "
                     f"({metrics['delta']['accuracy']:+.4f})")
    else:
        for old, new in zip(metrics["old"]["targets"], metrics["new"]["targets"], strict=True):
            lines.append(f"  RMSE {old['name']}: {old['rmse']:.4g} -> {new['rmse']:.4g} "
                         f"({new['rmse'] - old['rmse']:+.4g})")
    return lines


def format_diff_table(report) -> str:
    doc = report.as_dict() if hasattr(report, "as_dict") else report
    units = doc["outputs"]["units"]
    lines = [f"diff {doc['task']} bundle {doc['old']['bundle_id'][:12]} (old) -> "
             f"{doc['new']['bundle_id'][:12]} (new)"]
    domain = doc["domain"]
    if domain["same"]:
        lines.append("domain: the same declared domain")
    else:
        lines.append("domain CHANGED (the inputs a rejecting artifact accepts have moved); outputs "
                     "compared where both domains hold:")
        lines += [f"  {text}" for text in domain["differences"]]
    search = doc["search"]
    lines.append(f"largest change found over the domain (adversarial search, seed {search['seed']}, "
                 f"{search['evaluations']} evaluations; a change the models really make):")
    for record, unit in zip(search["per_output"], units, strict=True):
        lines.append(f"  {record['name']}: {_amount(record['max_abs_change'], unit)} at "
                     f"{_point(record['at'])} ({record['old']:.6g} -> {record['new']:.6g})")
    if doc["data"] is not None:
        lines += _data_lines(doc["data"], units)
    for gate in doc["gates"]:
        lines.append(f"gate {gate['name']}: {gate['value']:.6g} vs limit {gate['limit']:.6g} "
                     f"{'passed' if gate['passed'] else 'FAILED'}")
    if not doc["gates"]:
        lines.append("no gate asked for (--max-change): report only")
    lines.append(f"diff {'PASSED' if doc['passed'] else 'FAILED'}")
    return "\n".join(lines)


def _failure(gate: dict) -> str | None:
    if gate["passed"]:
        return None
    if gate["name"] == "domain":
        return "the declared domain changed"
    return f"largest change {gate['value']:.6g} exceeds the limit {gate['limit']:.6g}"


def diff_junit(document: dict) -> str:
    """One suite, one case per gate (or one "changes" case when there is no gate)."""
    name = "nodecast.diff"
    cases = [{"classname": name, "name": gate["name"], "failure": _failure(gate)}
             for gate in document["gates"]] or [{"classname": name, "name": "changes",
                                                 "failure": None}]
    props = {"old_bundle_id": document["old"]["bundle_id"],
             "new_bundle_id": document["new"]["bundle_id"], "task": document["task"],
             "seed": document["search"]["seed"]}
    suite = {"name": name, "cases": cases, "properties": props,
             "system_out": format_diff_table(document)}
    return junit_xml("nodecast diff", [suite])

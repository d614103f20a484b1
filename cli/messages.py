"""Lines the command line prints beside a command's result: warnings and one-line summaries."""

from __future__ import annotations

import click


def choice_line(bundle) -> str:
    """What the default search picked (train without --neighbors/--slope-scale)."""
    choice = bundle.metadata.get("layer_choice")
    if not choice:
        return ""
    k = bundle.metadata.get("diagnostics", {}).get("neighbors", choice["neighbors"])
    return (f"chose neighbors={k} slope_scale={choice['slope_scale']:g} by "
            f"generalized cross-validation over {len(choice['candidates'])} candidates; ")


def warn(text: str) -> None:
    click.echo(f"nodecast: warning: {text}", err=True)


def warn_more_nodes_than_rows(nodes: int, rows: int) -> None:
    """A warning when --nodes exceeds the rows (told when the first fit starts, after the data
    passed its checks; not for the default M, which is ours to choose)."""
    from nodecast.cli.progress import format_seconds
    from nodecast.trainer.cost import fit_seconds

    if nodes > rows > 0:
        warn(f"{nodes} nodes for {rows} rows: nodes beyond the number of rows add time and "
             f"ill-conditioning, not accuracy (the fit can already pass through every row); "
             f"expect about {format_seconds(2 * fit_seconds(rows, nodes))} of training; "
             "consider --nodes below the row count, or nodecast select")


def warn_rows_outside(bundle) -> None:
    outside, rows = bundle.metadata.get("rows_outside_domain"), bundle.metadata.get("rows")
    if isinstance(outside, int) and outside > 0:
        warn(f"{outside} of {rows} training rows lie outside the declared --domain; the model is "
             "fitted to them too, but artifacts treat such inputs by their --out-of-domain policy")


def metrics_line(bundle) -> str:
    metrics = bundle.metadata.get("metrics", {})
    parts = []
    for split in ("training", "validation"):
        values = metrics.get(split, {})
        if "rmse" in values:
            parts.append(f"{split} RMSE " + ", ".join(f"{v:.4g}" for v in values["rmse"]))
        if "accuracy" in values:
            parts.append(f"{split} accuracy {values['accuracy']:.4f}")
    return "; ".join(parts)


def emitted_line(output, target: str, summary: dict) -> str:
    bound = max(summary["certificate"]["certified_bound"])
    typical = summary.get("estimate", {}).get("max_abs_error", float("nan"))
    return (f"wrote {output} ({target}, {summary.get('precision', '?')}); certified max abs error "
            f"{bound:.3g} (typical {typical:.3g})")


def budget_warning(bundle, summary: dict) -> str | None:
    """One line when the certified bound exceeds the default accuracy budget, else None."""
    from nodecast.compiler.bounds.budget import accuracy_budget

    budget = accuracy_budget(bundle)
    bound = summary["certificate"]["certified_bound"]
    over = budget.exceeded_by(bound)
    if not over:
        return None
    o = over[0]
    return (f"the certified bound {bound[o]:.3g} of output {o} exceeds the accuracy budget "
            f"{budget.per_output[o]:.3g} ({budget.rule}); verify will fail this artifact unless "
            "given --abs-tol")


def write_reports(document: dict, report: str | None, junit: str | None, junit_text,
                  overwrite: bool) -> None:
    """A gate's JSON report and JUnit XML (``junit_text(document)``), each where asked."""
    from nodecast.compiler.files import write_atomic
    from nodecast.compiler.verify.report import to_json

    for path, text in ((report, to_json), (junit, junit_text)):
        if path:
            write_atomic(path, text(document).encode("utf-8"), overwrite=overwrite)

"""The ``nodecast score`` command: metrics of a bundle on labelled data, and gates for CI.

Kept apart from :mod:`nodecast.cli` (which registers it) so that file stays small; it
imports nothing heavy until it runs.
"""

from __future__ import annotations

import sys

import click

from nodecast.cli.messages import write_reports
from nodecast.cli.parsing import parse_limits

EXAMPLE = ("\b\nExample:\n  nodecast score fan.ncast held_out.csv --max-rmse 0.8 "
           "--baseline fan-old.ncast --junit score.xml")



@click.command("score", epilog=EXAMPLE)
@click.argument("model", type=click.Path(dir_okay=False))
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--max-rmse", metavar="X[,X..]",
              help="Gate: RMSE limit in target units (one, or one per target).")
@click.option("--min-accuracy", type=click.FloatRange(0, 1),
              help="Gate: smallest accuracy, a share 0..1 (classifiers).")
@click.option("--baseline", type=click.Path(dir_okay=False),
              help="Gate: an older bundle this one must not be worse than (see the margins).")
@click.option("--rmse-margin", type=click.FloatRange(min=0), default=0.01, show_default=True,
              help="Baseline gate: allowed relative RMSE increase (0.01 = 1%).")
@click.option("--accuracy-margin", type=click.FloatRange(min=0), default=0.005, show_default=True,
              help="Baseline gate: allowed accuracy drop, a share (0.005 = half a point).")
@click.option("--label-column",
              help="Classifiers: the label column (default: the one the bundle was trained on).")
@click.option("--report", type=click.Path(dir_okay=False), help="Write the JSON report here.")
@click.option("--junit", type=click.Path(dir_okay=False), help="Write a JUnit XML report here.")
@click.option("--overwrite", is_flag=True, help="Replace existing report files.")
def score(model, data, max_rmse, min_accuracy, baseline, rmse_margin, accuracy_margin,
          label_column, report, junit, overwrite):
    """Score MODEL on the labelled rows of DATA.csv; exit 1 when a gate fails.

    Regression: RMSE, MAE, max error and R^2 per target; classification: accuracy and a confusion
    table. Predictions come from the float64 reference.
    """
    from nodecast.compiler.bundle import load
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.scoring import score as run_score
    from nodecast.compiler.verify.report import format_score_table, score_junit

    check_outputs({"--report": report, "--junit": junit},
                  {"MODEL": model, "DATA": data, "--baseline": baseline}, overwrite)
    result = run_score(load(model), read_table(data), max_rmse=parse_limits(max_rmse, "--max-rmse"),
                       min_accuracy=min_accuracy, baseline=load(baseline) if baseline else None,
                       rmse_margin=rmse_margin, accuracy_margin=accuracy_margin,
                       label=label_column)
    click.echo(format_score_table(result))
    write_reports(result.as_dict(), report, junit, score_junit, overwrite)
    sys.exit(0 if result.passed else 1)

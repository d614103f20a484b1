"""The ``nodecast diff`` command: a model-change gate for a CI that retrains (see
:mod:`nodecast.compiler.model_diff`). Imports nothing heavy until it runs."""

from __future__ import annotations

import sys

import click

from nodecast.cli.messages import write_reports
from nodecast.cli.parsing import parse_limits

EXAMPLE = ("\b\nExample:\n  nodecast diff shipped.ncast fan.ncast --data held_out.csv --max-change 0.5 "
           "--junit diff.xml")



@click.command("diff", epilog=EXAMPLE)
@click.argument("old", type=click.Path(dir_okay=False))
@click.argument("new", type=click.Path(dir_okay=False))
@click.option("--data", type=click.Path(dir_okay=False),
              help="Also compare on these rows; with target columns, compare the metrics too.")
@click.option("--max-change", metavar="X[,X..]",
              help="Gate: largest allowed change of each output, in target units (one, or one "
                   "per output); a changed domain fails it too.")
@click.option("--samples", type=click.IntRange(min=1, max=10**6), default=20000, show_default=True,
              help="Random points the search starts from (plus the box's centre and corners).")
@click.option("--seed", type=click.IntRange(min=0, max=2**32 - 1), default=0, show_default=True)
@click.option("--report", type=click.Path(dir_okay=False), help="Write the JSON report here.")
@click.option("--junit", type=click.Path(dir_okay=False), help="Write a JUnit XML report here.")
@click.option("--overwrite", is_flag=True, help="Replace existing report files.")
def diff(old, new, data, max_change, samples, seed, report, junit, overwrite):
    """Compare NEW with the OLD model it replaces: domain, largest output change, metrics.

    The largest change is searched for over the declared domain (seeded random points, corners,
    then local ascent); it is a change the two models really make at the input shown. Exit 0 when
    every gate passes (or none is asked for), 1 when one fails, 2 on bad input.
    """
    from nodecast.cli.diff_report import diff_junit, format_diff_table
    from nodecast.compiler.bundle import load
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.model_diff import diff as run_diff

    limits = parse_limits(max_change, "--max-change")
    check_outputs({"--report": report, "--junit": junit}, {"OLD": old, "NEW": new, "--data": data},
                  overwrite)
    result = run_diff(load(old), load(new), read_table(data) if data else None, limits, seed,
                      samples)
    click.echo(format_diff_table(result))
    write_reports(result.as_dict(), report, junit, diff_junit, overwrite)
    sys.exit(0 if result.passed else 1)

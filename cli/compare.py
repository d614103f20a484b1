"""``nodecast compare``: every hidden-node generator tuned by k-fold cross-validation on the
user's data, one table. Parsing and printing only; the work is :mod:`nodecast.trainer.comparison`."""

from __future__ import annotations

import json
import sys

import click

from nodecast.cli.grid import layer_values, parse_methods, search_options

# the contenders of nodecast.trainer.comparison (the CLI loads the trainer only when it runs)
CONTENDERS = ("data-driven", "fixed-interval", "interval", "domain-anchored", "slope-angle",
              "weight-sum")
EXAMPLE = ("nodecast compare readings.csv --target heatsink_temp --report compare.json "
           "--plot compare.png")


@click.command(epilog=f"\b\nExample:\n  {EXAMPLE}")
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--target", required=True, help="Target column(s), comma-separated.")
@click.option("--features", help="Feature columns (default: every other column).")
@click.option("--domain", help="Declared input domain, NAME=LO:HI,.. (default: each fold's own "
                               "training rows' range).")
@click.option("--method", default=",".join(CONTENDERS), show_default=True,
              help="Contenders, comma-separated; fixed-interval is interval with u = 1 only.")
@search_options
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seeds the folds and every hidden-layer draw.")
@click.option("--jobs", default="auto", show_default=True,
              help="Parallel (fold, layer) units, or 'auto'; the errors are the same for any value.")
@click.option("--report", type=click.Path(dir_okay=False), help="Write every number as JSON here.")
@click.option("--plot", type=click.Path(dir_okay=False),
              help="Plot the CV error against M per contender as PNG (needs matplotlib).")
def compare(data, target, features, domain, method, nodes, neighbors, slope_scales, intervals,
            angle_ranges, weight_sums, ridge, folds, activation, seed, jobs, report, plot):
    """Tune every hidden-node generator on DATA.csv by k-fold cross-validation (each on its own
    grid, all on the same folds, nodes and ridge values) and rank them by CV error."""
    from nodecast.cli.parsing import parse_domain, parse_list, with_enough_folds
    from nodecast.cli.select import _jobs
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer.comparison import compare as run_compare
    from nodecast.trainer.comparison import contenders, format_table
    from nodecast.trainer.selection import SearchSettings
    from nodecast.trainer.selection_run import declared_box, finite_columns
    from nodecast.trainer.training import TrainingJob, feature_columns

    job = TrainingJob(targets=parse_list(target, option="--target"),
                      features=parse_list(features, option="--features"),
                      domain=parse_domain(domain))
    rows = contenders(parse_methods(method, CONTENDERS),
                      layer_values(neighbors, slope_scales, intervals, angle_ranges, weight_sums))
    table = read_table(data)
    names = feature_columns(table.header, job)
    X, Y = finite_columns(table, names, "feature"), finite_columns(table, job.targets, "target")
    nodes, ridges = parse_list(nodes, int, "--nodes"), parse_list(ridge, float, "--ridge")
    result = with_enough_folds(
        lambda count: run_compare(X, Y, rows, nodes, ridges,
                                  SearchSettings(count, seed, activation, n_jobs=_jobs(jobs)),
                                  declared_box(job, names), _progress()), folds)
    click.echo(format_table(result))
    if report:
        _write_report(report, result, names, job.targets)
    if plot:
        from nodecast.cli.comparison_plot import plot_comparison

        plot_comparison(result, plot)


def _progress():
    if not sys.stderr.isatty():
        return None

    def show(name: str, done: int, total: int) -> None:
        click.echo(f"\rcompare: {name}: {done}/{total} (fold, layer) units   ", nl=done == total,
                   err=True)

    return show


def _write_report(path, result, features, targets) -> None:
    from nodecast.compiler.files import write_atomic

    document = {"features": list(features), "targets": list(targets), **result.as_dict()}
    text = json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"
    write_atomic(path, text.encode("utf-8"), overwrite=True)

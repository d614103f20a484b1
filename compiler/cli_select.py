"""``nodecast select``: choose M, k, s and lambda by k-fold cross-validation and save the refit.

Parsing and printing only; the search is :mod:`nodecast.trainer.selection`, the final fit is
:func:`nodecast.trainer.training.train` itself, so ``nodecast train`` with the chosen options and
the same seed writes the same arrays.
"""

from __future__ import annotations

import json
import sys

import click

from nodecast.compiler.errors import NodecastError

EXAMPLE = ("nodecast select readings.csv --target heatsink_temp --nodes 50,100,250 "
           "--neighbors 10,20,30 --ridge 0,1e-6 --precision float32 --tolerance 0.05 "
           "-o fan.ncz --report cv.json --plot cv.png")


@click.command(epilog=f"\b\nExample:\n  {EXAMPLE}")
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--target", required=True, help="Target column(s), comma-separated.")
@click.option("--features", help="Feature columns (default: every other column).")
@click.option("--domain", help="Declared input domain, NAME=LO:HI,.. (default: the range of the "
                               "rows fitted, each fold's own training rows in the search).")
@click.option("--units", help="Units, NAME=UNIT,.. for features and targets.")
@click.option("--nodes", default="50,100,250", show_default=True, help="Hidden nodes M to try.")
@click.option("--neighbors", default="default", show_default=True,
              help="Neighbours k to try; 'default' is max(10, 2(n+1)).")
@click.option("--slope-scales", default="1", show_default=True, help="Slope scales s to try.")
@click.option("--ridge", default="0,1e-6", show_default=True,
              help="Ridge values lambda to try (0: minimum-norm least squares).")
@click.option("--folds", type=click.IntRange(min=2), default=10, show_default=True,
              help="Shuffled cross-validation folds.")
@click.option("--activation", type=click.Choice(["logistic", "tanh"]), default="logistic",
              show_default=True)
@click.option("--seed", type=int, default=0, show_default=True,
              help="Seeds the folds and every hidden-layer draw (the final model's seed).")
@click.option("--precision", type=click.Choice(["float32", "float64", "q31", "q15"]),
              help="Target precision: report the chosen model's estimated export error in it.")
@click.option("--tolerance", type=click.FloatRange(min=0, min_open=True),
              help="With --precision: reject grid points whose estimated export error exceeds "
                   "this (target units); exit 2 when none meets it.")
@click.option("--grow", is_flag=True, help="Grow the model in batches of nodes with the chosen "
                                           "k, s and lambda, keeping a batch only if it pays.")
@click.option("--grow-batch", type=click.IntRange(min=1), default=25, show_default=True,
              help="Nodes per batch.")
@click.option("--grow-threshold", type=click.FloatRange(0, 1), default=0.002, show_default=True,
              help="Relative fall of the CV error a batch must bring to be kept.")
@click.option("--grow-patience", type=click.IntRange(min=1), default=3, show_default=True,
              help="Rejected batches in a row before growth stops.")
@click.option("--grow-pool", type=click.IntRange(min=1),
              help="Candidate nodes drawn per fold (default: twice the largest --nodes).")
@click.option("--validation-fraction", type=click.FloatRange(0, 0.9), default=0.2,
              show_default=True, help="As for train: share of rows held out for the bundle's "
                                      "validation metrics (the bundle's model uses all rows).")
@click.option("--jobs", default="auto", show_default=True,
              help="Parallel (fold, k, s) units, or 'auto' (every core for large searches); the "
                   "result is the same for any value.")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Bundle (.ncz).")
@click.option("--report", type=click.Path(dir_okay=False), help="Write every number as JSON here.")
@click.option("--plot", type=click.Path(dir_okay=False),
              help="Plot the CV error against M per k as PNG (needs matplotlib).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
def select(data, target, features, domain, units, nodes, neighbors, slope_scales, ridge, folds,
           activation, seed, precision, tolerance, grow, grow_batch, grow_threshold, grow_patience,
           grow_pool, validation_fraction, jobs, output, report, plot, overwrite):
    """Choose nodes, neighbours, slope scale and ridge by k-fold cross-validation on DATA.csv,
    refit the choice on all rows and save it as a bundle."""
    from nodecast.compiler.bundle import save
    from nodecast.compiler.cli import parse_domain, parse_list, parse_units
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer.grid import make_grid
    from nodecast.trainer.growth import GrowthSettings
    from nodecast.trainer.selection import SearchSettings
    from nodecast.trainer.table_selection import run_selection
    from nodecast.trainer.training import TrainingJob

    if tolerance is not None and precision is None:
        raise NodecastError("--tolerance needs --precision (the precision to estimate it in)")
    job = TrainingJob(
        targets=parse_list(target, option="--target"),
        features=parse_list(features, option="--features"),
        domain=parse_domain(domain), units=parse_units(units), seed=seed,
        validation_fraction=validation_fraction)
    grid = make_grid(parse_list(nodes, int, "--nodes"), _neighbors(parse_list(neighbors)),
                     parse_list(slope_scales, float, "--slope-scales"),
                     parse_list(ridge, float, "--ridge"))
    settings = SearchSettings(folds, seed, activation, precision, tolerance, _jobs(jobs))
    growth = GrowthSettings(grow_batch, grow_threshold, grow_patience,
                            grow_pool or 2 * max(grid.nodes)) if grow else None
    result, bundle = run_selection(read_table(data), job, grid, settings, growth, _progress())
    save(bundle, output, overwrite=overwrite)
    if report:
        _write_report(report, result, bundle)
    if plot:
        from nodecast.trainer.selection_plot import plot_search

        plot_search(result, plot, overwrite=True)
    click.echo(_summary(result, bundle, output), err=True)


def _jobs(text: str) -> int | None:
    if text == "auto":
        return None
    if text.isdigit() and int(text) >= 1:
        return int(text)
    raise NodecastError(f"--jobs takes a positive integer or 'auto', got {text!r}")


def _neighbors(items) -> list:
    values = []
    for item in items:
        try:
            values.append(None if item == "default" else int(item))
        except ValueError:
            raise NodecastError(f"--neighbors takes integers or 'default', got {item!r}") from None
    return values


def _progress():
    if not sys.stderr.isatty():
        return None

    def show(done: int, total: int) -> None:
        click.echo(f"\rselect: {done}/{total} (fold, k, s) units", nl=done == total, err=True)

    return show


def _write_report(path, result, bundle) -> None:
    from nodecast.compiler.files import write_atomic

    document = {"bundle_id": bundle.bundle_id, "features": list(bundle.network.feature_names),
                "targets": list(bundle.network.target_names), **result.as_dict()}
    text = json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"
    write_atomic(path, text.encode("utf-8"), overwrite=True)


def _summary(result, bundle, output) -> str:
    chosen = result.chosen
    cv = ", ".join(f"{m:.4g} +/- {s:.2g}" for m, s in zip(chosen.rmse_mean, chosen.rmse_std,
                                                          strict=True))
    parts = [f"wrote {output} (bundle {bundle.bundle_id[:12]})", f"chose {chosen.describe()}",
             f"{result.settings.folds}-fold CV RMSE {cv}"]
    if result.growth is not None:
        final = result.growth.best()
        parts.append(f"grown to {result.growth.nodes} nodes, CV RMSE "
                     + ", ".join(f"{v:.4g}" for v in final["rmse_mean"]))
    if result.estimate is not None:
        rejected = sum(not p.meets_budget for p in result.points)
        parts.append(f"certified {result.estimate.precision} export error "
                     f"{result.estimate.max_abs:.3g}"
                     + (f" (tolerance {result.settings.tolerance:g}; {rejected} of "
                        f"{len(result.points)} grid points rejected)"
                        if result.settings.tolerance is not None else ""))
    return "; ".join(parts)


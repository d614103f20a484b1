"""``nodecast select``: choose M, the generator and its settings (data-driven: k and s) and lambda
by k-fold cross-validation and save the refit.

Parsing and printing only; the search is :mod:`nodecast.trainer.selection`, the final fit is
:func:`nodecast.trainer.training.train` itself, so ``nodecast train`` with the chosen options and
the same seed writes the same arrays.
"""

from __future__ import annotations

import json
from dataclasses import replace
from functools import partial

import click

from nodecast.cli.grid import layer_values, parse_methods, search_options
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import PRECISIONS

EXAMPLE = ("nodecast select readings.csv --target heatsink_temp "
           "--domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,supply_voltage=22:26 "
           "--nodes 50,100,250 "
           "--neighbors 10,20,30 --ridge 0,1e-6 --precision float32 --tolerance 0.05 "
           "-o fan.ncast --report cv.json --plot cv.png")


@click.command(epilog=f"\b\nExample:\n  {EXAMPLE}")
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--target", required=True, help="Target column(s), comma-separated.")
@click.option("--features", help="Feature columns (default: every other column).")
@click.option("--domain", help="Declared input domain, NAME=LO:HI,.. (default: the range of the "
                               "rows fitted, each fold's own training rows in the search).")
@click.option("--units", help="Units, NAME=UNIT,.. for features and targets.")
@click.option("--categorical", help="Categorical feature columns, comma-separated (levels read from "
                                    "the data; see docs/training.md).")
@click.option("--method", default="data-driven", show_default=True,
              help="Hidden-node generator(s) to search, comma-separated: data-driven, interval, "
                   "domain-anchored, slope-angle, weight-sum.")
@search_options
@click.option("--seed", type=click.IntRange(0, 2**32 - 1), default=0, show_default=True,
              help="Seeds the folds and every hidden-layer draw (the final model's seed).")
@click.option("--task", type=click.Choice(["regression", "classification"]), default="regression",
              show_default=True)
@click.option("--score", "scoring", type=click.Choice(["accuracy", "log-loss"]),
              default="accuracy", show_default=True,
              help="Classification: the cross-validated score that ranks the grid points.")
@click.option("--precision", type=click.Choice(PRECISIONS),
              help="Target precision: report the chosen model's estimated export error in it.")
@click.option("--tolerance", type=click.FloatRange(min=0, min_open=True),
              help="With --precision: reject grid points whose estimated export error exceeds "
                   "this (target units); exit 2 when none meets it.")
@click.option("--max-flash", help="Budget: flash of the model's C on --core, bytes (K, M "
                                   "suffixes); only node counts that fit are chosen.")
@click.option("--max-cycles", type=click.IntRange(min=1),
              help="Budget: estimated cycles per prediction on --core (emulated instruction "
                   "count times an assumed cycles per instruction).")
@click.option("--core", type=click.Choice(["cortex-m0", "cortex-m4f"]), default="cortex-m4f",
              show_default=True, help="The core of --max-flash and --max-cycles; the precision "
                                      "is --precision (default float32).")
@click.option("--grow", is_flag=True, help="Grow the model in batches of nodes with the chosen "
                                           "generator settings and lambda, keeping a batch only "
                                           "if it pays.")
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
              help="Parallel (fold, layer) units, or 'auto' (every core for large searches); the "
                   "result is the same for any value.")
@click.option("--chunk-rows", type=click.IntRange(min=1),
              help="Read DATA this many rows at a time, in memory that does not grow with the rows "
                   "(default: CSV files up to 32 MiB are read whole, larger ones and Parquet in "
                   "chunks of 50,000 rows; the result is the same). Not with --grow or "
                   "--categorical.")
@click.option("--cluster", metavar="ADDRESS|local[:N]",
              help="Run the search and the final fit on a Dask cluster: a scheduler address, or "
                   "local[:N] for a local cluster of N workers (docs/scale.md). Not with --grow or "
                   "--categorical.")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="Bundle (.ncast).")
@click.option("--report", type=click.Path(dir_okay=False), help="Write every number as JSON here.")
@click.option("--plot", type=click.Path(dir_okay=False),
              help="Plot the CV error against M per k as PNG (needs matplotlib).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
def select(data, target, features, domain, units, categorical, method, nodes, neighbors,
           slope_scales, intervals, angle_ranges, weight_sums, ridge, folds, activation, seed, task,
           scoring, precision, tolerance, max_flash, max_cycles, core, grow, grow_batch,
           grow_threshold, grow_patience, grow_pool, validation_fraction, jobs, chunk_rows, cluster,
           output, report, plot, overwrite):
    """Choose nodes, the generator and its settings, and ridge by k-fold cross-validation on
    DATA (CSV, or Parquet by its .parquet suffix; a classifier: by accuracy or log-loss), refit
    the choice on all rows and save it as a bundle."""
    from nodecast.cli.parsing import (
        DEFAULT_FOLDS,
        check_scaling,
        check_units,
        parse_domain,
        parse_list,
        parse_units,
        with_enough_folds,
    )
    from nodecast.cli.select_runs import in_memory_search, scaled_search
    from nodecast.compiler.bundle import save
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.provenance import file_record, with_training_data
    from nodecast.trainer.grid import make_grid
    from nodecast.trainer.growth import GrowthSettings
    from nodecast.trainer.method_grid import layer_grid
    from nodecast.trainer.selection import SearchSettings
    from nodecast.trainer.selection_run import run_selection
    from nodecast.trainer.sources import MemorySource, open_source
    from nodecast.trainer.training import TrainingJob

    check_outputs({"-o": output, "--report": report, "--plot": plot}, {"DATA": data}, overwrite)
    check_scaling(chunk_rows, cluster)
    if tolerance is not None and precision is None:
        raise NodecastError("--tolerance needs --precision (the precision to estimate it in)")
    job = TrainingJob(
        targets=parse_list(target, option="--target"),
        features=parse_list(features, option="--features"),
        domain=parse_domain(domain), units=parse_units(units), seed=seed,
        validation_fraction=validation_fraction,
        categorical=parse_list(categorical, option="--categorical"))
    layers = layer_grid(parse_methods(method), layer_values(neighbors, slope_scales, intervals,
                                                            angle_ranges, weight_sums))
    grid = make_grid(parse_list(nodes, int, "--nodes"), parse_list(ridge, float, "--ridge"), layers)
    settings = SearchSettings(folds or DEFAULT_FOLDS, seed, activation, precision, tolerance,
                              _jobs(jobs))
    source = None if cluster else open_source(data, chunk_rows)
    scaled = partial(scaled_search, data, source, cluster) \
        if cluster or not isinstance(source, MemorySource) else None
    if scaled and grow:
        raise NodecastError("--grow needs the table in memory; read the file whole (a CSV file "
                            "without --chunk-rows or --cluster)")
    if task == "classification":
        from nodecast.trainer.class_selection import run_class_selection

        if precision or grow:
            raise NodecastError("--precision, --tolerance and --grow are for regression; "
                                "classifier selection takes the grid, --folds and --score")
        def search_classes(count):
            if scaled:
                return scaled(replace(job, task=task), grid, replace(settings, folds=count),
                              scoring=scoring)
            return run_class_selection(source.table, replace(job, task=task), grid, count,
                                       activation, scoring, _jobs(jobs) or 1)

        result, bundle = with_enough_folds(search_classes, folds)
        save(bundle, output, overwrite=overwrite)
        if report:
            _write_report(report, result, bundle, overwrite)
        click.echo(f"wrote {output} (bundle {bundle.bundle_id[:12]}); chose "
                   f"{result.describe()}", err=True)
        return
    growth = GrowthSettings(grow_batch, grow_threshold, grow_patience,
                            grow_pool or 2 * max(grid.nodes)) if grow else None
    table = source.table if not scaled else (source or open_source(data, chunk_rows=1))
    record = file_record(data)  # after the file was opened: a missing one is a one-line error
    check_units(job.units, table, job)  # a scaled run reads the header only here
    budget = _budget(table, job, grid, precision, core, max_flash, max_cycles, grow)
    allowed = None if budget is None else budget["allowed_nodes"]

    def search(count):
        if scaled:
            return scaled(job, grid, replace(settings, folds=count), allowed_nodes=allowed)
        return in_memory_search(run_selection, table, job, grid, replace(settings, folds=count),
                                growth, allowed, UnitClock)

    result, bundle = with_enough_folds(search, folds)
    bundle = with_training_data(bundle, record)

    save(bundle, output, overwrite=overwrite)
    if budget is not None:
        budget["frontier"] = _frontier(result, budget)
        click.echo(_budget_lines(budget, bundle.network.n_nodes), err=True)
    if report:
        _write_report(report, result, bundle, overwrite, budget)
    if plot:
        from nodecast.cli.selection_plot import plot_search

        net = bundle.network
        plot_search(result, plot, overwrite=overwrite, target=net.target_names[0],
                    unit=net.target_units[0], n_features=net.n_features)
    click.echo(_summary(result, bundle, output), err=True)
    from nodecast.cli.selection_plot import edge_hints

    for hint in edge_hints(result):
        click.echo(f"nodecast: hint: {hint}", err=True)


def _jobs(text: str) -> int | None:
    if text == "auto":
        return None
    if text.isascii() and text.isdigit() and int(text) >= 1:
        return int(text)
    raise NodecastError(f"--jobs takes a positive integer or 'auto', got {text!r}")


class UnitClock:
    """The search's progress callback: units done with time left, then the final refit (or the
    growth) with an estimate from the units' measured pace (trainer.cost's work model)."""

    def __init__(self, progress, rows: int, max_nodes: int, folds: int, grow: bool):
        import time

        self.progress, self.rows, self.max_nodes, self.folds = progress, rows, max_nodes, folds
        self.grow, self.clock, self.started = grow, time.monotonic, time.monotonic()
        progress.stage("cross-validating the grid")

    def __call__(self, done: int, total: int) -> None:
        from nodecast.trainer.cost import fit_units

        spent = self.clock() - self.started
        if done < total:
            self.progress.stage(f"{done} of {total} (fold, k, s) units done",
                                spent / done * total, since=self.started)
            return
        fold_rows = self.rows * (self.folds - 1) // self.folds
        rate = spent / total / max(fit_units(fold_rows, self.max_nodes), 1.0)
        if self.grow:
            self.progress.stage("growing the chosen model in batches")
        else:  # train's two fits (all rows, validation split) of at most the largest M
            self.progress.stage("refitting the choice on all rows",
                                2 * rate * fit_units(self.rows, self.max_nodes))


def _budget(table, job, grid, precision, core, max_flash, max_cycles, grow) -> dict | None:
    """Flash and cycles of every --nodes value on ``core``, and those within the budgets."""
    if max_flash is None and max_cycles is None:
        return None
    from nodecast.compiler.files import parse_size
    from nodecast.compiler.target_budget import allowed_nodes, grid_costs
    from nodecast.trainer.training import feature_columns

    if grow:
        raise NodecastError("--max-flash and --max-cycles apply to a grid search, not to --grow")
    flash = None if max_flash is None else parse_size(max_flash)
    costs = grid_costs(len(feature_columns(table.header, job)), len(job.targets), grid.nodes,
                       precision or "float32", core)
    return {"core": core, "precision": precision or "float32", "max_flash": flash,
            "max_cycles": max_cycles, "costs": costs,
            "allowed_nodes": allowed_nodes(costs, flash, max_cycles)}


def _frontier(result, budget) -> list[dict]:
    """Per node count: the best cross-validated RMSE (largest over targets) beside its cost."""
    best = {}
    for p in result.points:
        best[p.nodes] = min(best.get(p.nodes, float("inf")), max(p.rmse_mean))
    return [{**cost, "cv_rmse": best[cost["nodes"]],
             "meets_budget": cost["nodes"] in budget["allowed_nodes"]} for cost in budget["costs"]]


def _budget_lines(budget, chosen_nodes) -> str:
    lines = [f"budget on {budget['core']} ({budget['precision']}): nodes, flash, cycles, CV RMSE"]
    for row in budget["frontier"]:
        mark = " <- chosen" if row["nodes"] == chosen_nodes else (
            "" if row["meets_budget"] else " (over budget)")
        lines.append(f"  {row['nodes']:>6} {row['flash']:>8} B {row['cycles']:>10} "
                     f"{row['cv_rmse']:.4g}{mark}")
    return "\n".join(lines)


def _write_report(path, result, bundle, overwrite: bool, budget=None) -> None:
    from nodecast.compiler.files import write_atomic

    document = {"bundle_id": bundle.bundle_id, "features": list(bundle.network.feature_names),
                "targets": list(bundle.network.target_names), **result.as_dict()}
    if budget is not None:
        document["budget"] = budget
    text = json.dumps(document, indent=2, sort_keys=True, allow_nan=False) + "\n"
    write_atomic(path, text.encode("utf-8"), overwrite=overwrite)


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


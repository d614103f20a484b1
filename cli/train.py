"""nodecast train: fit a network to a CSV or Parquet table and save the bundle."""

from __future__ import annotations

import click

from nodecast.cli.messages import choice_line, metrics_line, warn_more_nodes_than_rows, warn_rows_outside
from nodecast.cli.parsing import (
    SEED,
    check_scaling,
    check_units,
    example,
    parse_domain,
    parse_list,
    parse_neighbors,
    parse_range,
    parse_ridge,
    parse_slope_scale,
    parse_units,
)


@click.command(epilog=example("train"))
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--target", required=True, help="Target column(s), comma-separated.")
@click.option("--features", help="Feature columns (default: every other column).")
@click.option("--domain", help="Declared input domain, NAME=LO:HI,.. (default: the data's range).")
@click.option("--units", help="Units, NAME=UNIT,.. for features and targets.")
@click.option("--categorical", help="Categorical feature columns, comma-separated: each level (read "
                                    "from the data) gets its own contribution to every node.")
@click.option("--method", type=click.Choice(["data-driven", "interval", "domain-anchored",
                                            "slope-angle", "weight-sum"]),
              default="data-driven", show_default=True, help="Hidden-node generator.")
@click.option("--nodes", type=click.IntRange(min=1), default=200, show_default=True,
              help="Hidden nodes M.")
@click.option("--neighbors", default="auto", show_default=True,
              help="Neighbours k of the data-driven nodes: a count, 'default' (max(10, 2(n+1))) or "
                   "'auto' (chosen with the slope scale by generalized cross-validation).")
@click.option("--slope-scale", default="auto", show_default=True,
              help="Slope-scale factor s of the data-driven nodes, a positive number or 'auto'.")
@click.option("--interval", type=click.FloatRange(min=0, min_open=True), default=1.0,
              show_default=True, help="u of the U(-u, u) weights of interval and domain-anchored.")
@click.option("--angle-range", default="0:70", show_default=True,
              help="slope-angle: range LO:HI of the slope angles in degrees.")
@click.option("--weight-sum", default="2:10", show_default=True,
              help="weight-sum: range R:S of each node's sum of weight magnitudes.")
@click.option("--ridge", default="auto", show_default=True,
              help="Ridge lambda on the output weights, a number >= 0 (0: minimum-norm least "
                   "squares) or 'auto' (generalized cross-validation, float32-safe; see "
                   "docs/training.md).")
@click.option("--activation", type=click.Choice(["logistic", "tanh"]), default="logistic",
              show_default=True)
@click.option("--task", type=click.Choice(["regression", "classification"]), default="regression",
              show_default=True)
@click.option("--seed", type=SEED, default=0, show_default=True)
@click.option("--validation-fraction", type=click.FloatRange(0, 0.9), default=0.2, show_default=True,
              help="Share of rows held out (at most about 20,000) for the automatic ridge's check "
                   "and the reported validation error, from the same fit (the bundle's model is "
                   "fitted on all rows; 0: none).")
@click.option("--chunk-rows", type=click.IntRange(min=1),
              help="Read DATA this many rows at a time, in memory that does not grow with the rows "
                   "(default: CSV files up to 32 MiB are read whole, larger ones and Parquet in "
                   "chunks of 50,000 rows; the model is the same).")
@click.option("--cluster", metavar="ADDRESS|local[:N]",
              help="Run the passes on a Dask cluster: a scheduler address, or local[:N] for a local "
                   "cluster of N workers (docs/scale.md).")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="Bundle (.ncast).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
def train(data, target, features, domain, units, categorical, method, nodes, neighbors, slope_scale,
          interval, angle_range, weight_sum, ridge, activation, task, seed, validation_fraction,
          chunk_rows, cluster, output, overwrite):
    """Train a network on DATA (CSV, or Parquet by its .parquet suffix) and save it as a bundle."""
    from nodecast.cli.progress import Progress, run_interruptible
    from nodecast.compiler.bundle import save
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.provenance import file_record, with_training_data
    from nodecast.trainer.cost import FitClock
    from nodecast.trainer.sources import MemorySource, open_source
    from nodecast.trainer.training import TrainingJob, heavy_tail_note
    from nodecast.trainer.training import train as run_training

    check_outputs({"-o": output}, {"DATA": data}, overwrite)  # before training, not after it
    check_scaling(chunk_rows, cluster)

    job = TrainingJob(
        targets=parse_list(target, option="--target"), features=parse_list(features, option="--features"),
        task=task, domain=parse_domain(domain), units=parse_units(units), seed=seed,
        validation_fraction=validation_fraction,
        categorical=parse_list(categorical, option="--categorical"),
        params=dict(n_nodes=nodes, method=method, n_neighbors=parse_neighbors(neighbors),
                    slope_scale=parse_slope_scale(slope_scale), interval=interval,
                    angle_range=parse_range(angle_range, "--angle-range"),
                    weight_sum=parse_range(weight_sum, "--weight-sum"),
                    ridge=parse_ridge(ridge), activation=activation))
    # a cluster's workers read the file themselves; here only its header (a missing file: one line)
    source = open_source(data, 1 if cluster else chunk_rows)
    record = file_record(data)
    if not isinstance(source, MemorySource):
        bundle = _train_scaled(data, source, job, chunk_rows, cluster)
    else:
        table = source.table
        check_units(job.units, table, job)
        given = click.get_current_context().get_parameter_source("nodes").name == "COMMANDLINE"
        with Progress("train") as progress:
            clock = FitClock(progress, nodes, on_start=warn_more_nodes_than_rows if given else None)
            bundle = run_interruptible(run_training, table, job, callback=clock, progress=progress)
    bundle = with_training_data(bundle, record)
    save(bundle, output, overwrite=overwrite)
    click.echo(f"wrote {output} (bundle {bundle.bundle_id[:12]}); {choice_line(bundle)}"
               f"{metrics_line(bundle)}", err=True)
    note = heavy_tail_note(bundle.metadata)
    if note:
        click.echo(note, err=True)
    warn_rows_outside(bundle)


def _train_scaled(data, source, job, chunk_rows, cluster):
    """The bundle of ``train`` streamed from disk (``source``) or on a Dask cluster (docs/scale.md)."""
    from nodecast.cli.progress import Progress, cluster_stage

    with Progress("train") as progress:
        progress.stage(cluster_stage(cluster))
        progress.start()
        try:
            check_units(job.units, source, job)
            if cluster:
                from nodecast.trainer.cluster_training import train_on_cluster

                return train_on_cluster(data, job, cluster, progress.passes())
            from nodecast.trainer.streaming import train_streaming

            return train_streaming(source, job, progress.passes())
        finally:
            source.close()  # the spilled copy goes now, not when the garbage collector finds it

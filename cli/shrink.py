"""The ``nodecast shrink`` command: remove hidden nodes within a certified error budget.

Parsing and printing only. The passes are :mod:`nodecast.compiler.passes.shrink`; the optional
re-solve of the output layer on data (``--data``) is a trainer step,
:func:`nodecast.trainer.refit.refit_output_layer`, imported only when asked for, so the compiler
itself never depends on the trainer (this command module is CLI glue, like ``train``).
"""

from __future__ import annotations

import click

from nodecast.compiler.errors import NodecastError

EXAMPLE = ("\b\nExample:\n  nodecast shrink fan.ncast --max-error 0.05 -o fan-small.ncast\n"
           "  nodecast shrink fan.ncast --max-error 0.05 --data readings.csv -o fan-small.ncast")


@click.command("shrink", epilog=EXAMPLE)
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--max-error", required=True, type=click.FloatRange(min=0),
              help="Error budget in target units: the shrunk model stays within it of MODEL for "
                   "every input of the declared domain (each output).")
@click.option("--actions", default="merge,fold,drop", show_default=True,
              help="Which removals to use, comma-separated.")
@click.option("--data", type=click.Path(dir_okay=False),
              help="Then re-solve the output layer on these labelled rows (a training step; the "
                   "certified budget no longer covers the result, the report gives its RMSE).")
@click.option("--ridge", type=click.FloatRange(min=0),
              help="--data: ridge of the re-solve (default: the source model's).")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False),
              help="The shrunk bundle (.ncast).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
def shrink(model, max_error, actions, data, ridge, output, overwrite):
    """Remove nodes of MODEL that are nearly constant, duplicate or negligible over the domain."""
    from nodecast.compiler.bundle import load, save
    from nodecast.compiler.passes.shrink import shrink_bundle

    source = load(model)
    chosen = tuple(a.strip() for a in actions.split(",") if a.strip())
    bundle, result = shrink_bundle(source, max_error, chosen)
    counts = result.counts()
    done = {"merge": "merged", "fold": "folded into the bias", "drop": "dropped"}
    click.echo(f"shrink: {source.network.n_nodes} -> {bundle.network.n_nodes} nodes ("
               + ", ".join(f"{counts[a]} {done[a]}" for a in counts)
               + f"); certified bound {max(result.error_bound, default=0.0):.4g} <= budget "
               f"{max_error:g} over the declared domain", err=True)
    if data:
        bundle = _refit(bundle, source, data, ridge)
    save(bundle, output, overwrite=overwrite)
    click.echo(f"wrote {output}", err=True)


def _refit(bundle, source, data, ridge):
    from nodecast.compiler.bundle import Bundle
    from nodecast.compiler.csvio import read_table
    from nodecast.trainer.refit import refit_output_layer, rmse

    net = bundle.network
    if net.task != "regression":
        raise NodecastError("--data re-solves regression models only; shrink the classifier "
                            "without --data")
    table = read_table(data)
    X, Y = table.numbers(net.feature_names), table.numbers(net.target_names)
    if ridge is None:
        ridge = float(source.metadata.get("ridge", {}).get("value", 0.0))
    before = rmse(net, X, Y)
    refitted = refit_output_layer(net, X, Y, ridge)
    after = rmse(refitted, X, Y)
    record = {"rows": int(X.shape[0]), "ridge": ridge, "rmse_before": before, "rmse_after": after,
              "source_rmse": rmse(source.network, X, Y),
              "note": "the output layer was re-solved on these rows after shrinking; the "
                      "certified shrink bound does not cover this step"}
    click.echo(f"re-solved the output layer on {X.shape[0]} rows: RMSE "
               f"{', '.join(f'{v:.4g}' for v in before)} -> {', '.join(f'{v:.4g}' for v in after)}"
               f" (source model {', '.join(f'{v:.4g}' for v in record['source_rmse'])})", err=True)
    return Bundle(network=refitted, metadata={**bundle.metadata, "refit": record})

"""nodecast inspect: what a bundle holds, its diagnostics and the certified bounds of its artifacts."""

from __future__ import annotations

import json

import click

from nodecast.cli.parsing import example, load_bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import PRECISIONS


@click.command(epilog=example("inspect"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--precision", type=click.Choice(PRECISIONS),
              help="Also estimate the export error in this precision.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of text.")
@click.option("--plot", "plot_folder", type=click.Path(), metavar="DIR",
              help="Also draw nodes.png (each node's pre-activation range over the domain) into "
                   "this folder, and predicted_vs_actual.png with --data (needs matplotlib).")
@click.option("--data", type=click.Path(dir_okay=False),
              help="With --plot: labelled rows for the predicted-against-actual plot.")
@click.option("--overwrite", is_flag=True, help="Replace existing plot files.")

@click.option("--cost", is_flag=True,
              help="Also build the C for --precision (default float32) and show its footprint "
                   "and instructions per prediction on emulated Cortex-M0 and M4F.")
def inspect(model, precision, as_json, plot_folder, data, overwrite, cost):
    """Show a bundle: sizes, domain, metrics, node diagnostics and error estimates."""
    from nodecast.compiler.inspection import describe_bundle, format_description, target_cost

    if data and not plot_folder:
        raise NodecastError("--data is for the predicted-against-actual plot; add --plot DIR")
    bundle = load_bundle(model)
    if plot_folder:
        from nodecast.cli.plots import plot_bundle
        from nodecast.compiler.csvio import read_table

        for path in plot_bundle(bundle, plot_folder, read_table(data) if data else None, overwrite):
            click.echo(f"wrote {path}", err=True)
    if precision:
        from nodecast.compiler.limits import check_memory, estimate_bytes

        check_memory(estimate_bytes(bundle.network), f"the {precision} error estimate of "
                     f"{bundle.network.n_nodes} nodes", "inspect without --precision")
    description = describe_bundle(bundle, precision)
    if cost:
        description["cost"] = target_cost(bundle, precision or "float32")
    click.echo(json.dumps(description, indent=2, sort_keys=True) if as_json
               else format_description(description))

"""nodecast demo: the whole job on the built-in demo scenario (:mod:`.demo_scenario`)."""

from __future__ import annotations

import sys
from pathlib import Path

import click

from nodecast.cli.parsing import example


@click.command(epilog=example("demo"))
@click.option("-o", "--output", default="demo-out", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo's data, bundle, artifacts and reports.")
@click.option("--data-only", is_flag=True,
              help="Only write the demo data (readings.csv, held_out.csv), for your own experiments.")
@click.option("--overwrite", is_flag=True, help="Replace the demo's files left in the folder.")
def demo(output, data_only, overwrite):
    """Run the whole job on the built-in demo scenario (a cooling-fan controller).

    The scenario is invented: four sensor readings of a made-up power stage (ambient temperature,
    fan speed, load current, supply voltage) and its heatsink temperature, from a made-up formula
    plus noise.
    """
    from nodecast.cli.demo_scenario import check_demo_outputs, run_demo, write_data

    check_demo_outputs(Path(output), data_only, overwrite)
    if data_only:
        write_data(Path(output), overwrite)
        click.echo(f"wrote {Path(output) / 'readings.csv'} and {Path(output) / 'held_out.csv'}", err=True)
        return
    sys.exit(run_demo(Path(output), echo=click.echo, overwrite=overwrite))

"""nodecast verify: run an artifact in its runtime and hold it to its certified bound."""

from __future__ import annotations

import sys

import click

from nodecast.cli.messages import write_reports
from nodecast.cli.parsing import SEED, example, load_bundle


@click.command(epilog=example("verify"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.argument("artifact", type=click.Path())
@click.option("--data", type=click.Path(dir_okay=False), help="Also probe the rows of this CSV.")
@click.option("--probes", type=click.IntRange(min=1), default=4096, show_default=True,
              help="Quasi-random probes in the declared domain.")
@click.option("--seed", type=SEED, default=0, show_default=True)
@click.option("--abs-tol", type=click.FloatRange(min=0), help="Tolerance in target units.")
@click.option("--rel-tol", type=click.FloatRange(min=0), help="Tolerance, share of the output range.")
@click.option("--report", type=click.Path(dir_okay=False), help="Write the JSON report here.")
@click.option("--junit", type=click.Path(dir_okay=False), help="Write a JUnit XML report here.")
@click.option("--emulate", type=click.Choice(["cortex-m3", "cortex-m4"]),
              help="C artifacts: run on an emulated Cortex-M (QEMU) instead of the host.")
@click.option("--overwrite", is_flag=True, help="Replace existing report files.")
def verify(model, artifact, data, probes, seed, abs_tol, rel_tol, report, junit, emulate, overwrite):
    """Run ARTIFACT in its real runtime and compare it with the bundle's reference.

    Exit 0 when every probe family agrees within the tolerance, 1 when one does not, 2 on bad input.

    Verify runs the artifact's code: a C artifact is compiled and run, a Python predictor is run.
    Verify only artifacts you trust as much as code you would run. They run in a child process
    with an empty environment and a time limit, and the report says when a generated file changed
    since emit (each records its SHA-256).
    """
    from nodecast.cli.progress import EngineClock, Progress
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.levels import table_rows
    from nodecast.compiler.verify import format_table
    from nodecast.compiler.verify import verify as run_verify
    from nodecast.compiler.verify.report import verify_junit

    check_outputs({"--report": report, "--junit": junit},
                  {"MODEL": model, "ARTIFACT": artifact, "--data": data}, overwrite)
    bundle = load_bundle(model)
    rows = table_rows(read_table(data), bundle.network) if data else None
    run_options = {"emulate": emulate} if emulate else {}
    with Progress("verify") as progress:
        progress.stage("drawing probes and the reference outputs")
        progress.start()
        result = run_verify(bundle, artifact, rows, probes, seed, abs_tol, rel_tol,
                            on_engine=EngineClock(progress), **run_options)
    click.echo(format_table(result))
    write_reports(result.as_dict(), report, junit, verify_junit, overwrite)
    sys.exit(0 if result.passed else 1)

"""nodecast emit: compile a bundle into an artifact for one target."""

from __future__ import annotations

from pathlib import Path

import click

from nodecast.cli.messages import budget_warning, emitted_line
from nodecast.cli.parsing import example, load_bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import TARGETS, all_choices, foreign_option_error


@click.command(epilog=example("emit"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--to", "target", required=True, type=click.Choice(list(TARGETS)))
@click.option("--precision", type=click.Choice(all_choices("precision")),
              help="Arithmetic of the artifact (default: float32 for onnx and c, float64 for python).")
@click.option("--out-of-domain", type=click.Choice(all_choices("out_of_domain")),
              help="What the artifact does with inputs outside the declared domain (default: pass; "
                   "clamp for q31/q15, whose integers hold the declared domain only).")
@click.option("--flag-out-of-domain", is_flag=True, default=None,
              help="ONNX: add a boolean output per row.")
@click.option("--opset", type=int,
              help="ONNX operator set version (default: the oldest this graph needs, 9, or 18 with "
                   "--flag-out-of-domain; see docs/onnx.md).")
@click.option("--prefix", help="C: file and identifier prefix (default: the bundle's file name when "
                               "it is a C identifier, else 'model').")
@click.option("--activation-impl", type=click.Choice(TARGETS["c"].option("activation_impl").choices),
              help="C: how tanh is evaluated (default: rational for float32, libm for float64, "
                   "table for q31/q15).")
@click.option("--table-size", type=click.IntRange(*TARGETS["c"].option("table_size").value_range),
              help="C, --activation-impl table: table intervals (default 512; q31 2048).")
@click.option("--bare-metal", is_flag=True, default=None,
              help="C: also write startup.c and mps2.ld, to run your own main.c bare metal on "
                   "QEMU's MPS2 Cortex-M3/M4 boards (the board support verify --emulate uses).")
@click.option("--instruction-count/--no-instruction-count", default=None,
              help="C: count the instructions per prediction on emulated Cortex-M0 and M4F "
                   "(QEMU; default: on).")
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output file (onnx, python) or folder (c).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
@click.option("--max-artifact-size", "max_size",
              help="Refuse to write an artifact larger than this, in bytes or with K, M, G "
                   "(default 64M).")
def emit(model, target, output, overwrite, max_size, **given):
    """Compile a bundle into an artifact for a target."""
    from nodecast.compiler import emit as emit_artifact
    from nodecast.compiler.files import check_outputs, parse_size

    check_outputs({"-o": output}, {"MODEL": model}, overwrite, folders=("-o",) if target == "c" else ())
    options = target_options(target, model, {k: v for k, v in given.items() if v is not None})
    max_bytes = None if max_size is None else parse_size(max_size)
    artifact = emit_artifact(load_bundle(model), target, output, overwrite=overwrite,
                             max_bytes=max_bytes, **options)
    click.echo(emitted_line(output, target, artifact.summary), err=True)
    warning = budget_warning(load_bundle(model), artifact.summary)
    if warning:
        click.echo(f"warning: {warning}", err=True)
    if "footprint" in artifact.summary:
        from nodecast.compiler.toolchain import format_footprint

        click.echo(format_footprint(artifact.summary["footprint"], artifact.summary["weight_bytes"]),
                   err=True)
    if "instructions" in artifact.summary:
        from nodecast.compiler.instruction_count import format_counts

        click.echo(format_counts(artifact.summary["instructions"]), err=True)


def target_options(target: str, model: str, given: dict) -> dict:
    """The options given on the command line, refused when ``target`` does not take them, with the
    command line's own defaults for C (a prefix from the bundle's name, instruction counts on)."""
    spec = TARGETS[target]
    for name in given:
        if name not in spec.names:
            raise foreign_option_error(target, name)
    if target == "c":
        given = {"prefix": default_prefix(model), "instruction_count": True, **given,
                 "footprint": True}
    return given


def default_prefix(model: str) -> str:
    """The bundle's file name without its extension when it is a valid C identifier (so that two
    models link into one firmware without clashes), else ``model``."""
    from nodecast.compiler.backends.c_format import check_prefix

    try:
        return check_prefix(Path(model).name.split(".")[0])
    except NodecastError:
        return "model"

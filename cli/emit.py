"""nodecast emit: compile a bundle into an artifact for one target."""

from __future__ import annotations

import re
from pathlib import Path

import click

from nodecast.cli.messages import budget_warning, emitted_line, warn
from nodecast.cli.parsing import example, load_bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import TARGETS, all_choices, foreign_option_error

C, ONNX = TARGETS["c"], TARGETS["onnx"]


def _default(spec, name: str) -> str:
    return f"default: {spec.default_text(spec.option(name))}"


@click.command(epilog=example("emit"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--to", "target", required=True, type=click.Choice(list(TARGETS)))
@click.option("--precision", type=click.Choice(all_choices("precision")),
              help="Arithmetic of the artifact (default: "
                   + "; ".join(f"{s.default_precision} for {n}" for n, s in TARGETS.items()) + ").")
@click.option("--out-of-domain", type=click.Choice(all_choices("out_of_domain")),
              help="What the artifact does with inputs outside the declared domain ("
                   + _default(C, "out_of_domain") + "; q31/q15 integers hold the declared domain "
                   "only).")
@click.option("--flag-out-of-domain", is_flag=True, default=None,
              help="ONNX: add a boolean output per row.")
@click.option("--opset", type=click.IntRange(*ONNX.option("opset").value_range),
              help="ONNX operator set version (default: the oldest this graph needs: 9, or 18 with "
                   "--flag-out-of-domain or categorical inputs; see docs/onnx.md).")
@click.option("--prefix", help="C: file and identifier prefix (default: the bundle's file name, "
                               "lower-cased, other characters as '_', when that makes a C "
                               "identifier, else 'model').")
@click.option("--activation-impl", type=click.Choice(C.option("activation_impl").choices),
              help="C: how tanh is evaluated (" + _default(C, "activation_impl") + ").")
@click.option("--table-size", type=click.IntRange(*C.option("table_size").value_range),
              help="C, --activation-impl table: table intervals (" + _default(C, "table_size") + ").")
@click.option("--scales", type=click.Choice(C.option("scales").choices),
              help="C, q31/q15: one fixed-point Q format per hidden node (node), where that pays, "
                   "or per layer (layer, the scheme of earlier versions) (" + _default(C, "scales")
                   + ").")
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
    max_bytes = None if max_size is None else parse_size(max_size)
    bundle = load_bundle(model)  # before any warning: a bundle that does not load is one line
    options = target_options(target, model, {k: v for k, v in given.items() if v is not None})
    artifact = emit_artifact(bundle, target, output, overwrite=overwrite, max_bytes=max_bytes,
                             **options)
    click.echo(emitted_line(output, target, artifact.summary), err=True)
    warning = budget_warning(bundle, artifact.summary)
    if warning:
        warn(warning)
    if target == "c":
        warn_other_c_models(Path(output), options["prefix"])
    if "footprint" in artifact.summary:
        from nodecast.compiler.toolchain import format_footprint

        click.echo(format_footprint(artifact.summary["footprint"], artifact.summary["weight_bytes"]),
                   err=True)
    if "instructions" in artifact.summary:
        from nodecast.compiler.instruction_count import format_counts

        click.echo(format_counts(artifact.summary["instructions"]), err=True)


def target_options(target: str, model: str, given: dict) -> dict:
    """The options given on the command line, refused when ``target`` does not take them, with the
    command line's own defaults for C (a prefix from the bundle's name, instruction counts on,
    the footprint always measured)."""
    spec = TARGETS[target]
    for name in given:
        if name not in spec.names:
            raise foreign_option_error(target, name)
    if target == "c":
        given = {"prefix": given.get("prefix") or default_prefix(model), "instruction_count": True,
                 **given, "footprint": True}
    return given


def default_prefix(model: str) -> str:
    """The bundle's file name without its last extension, lower-cased, other characters as '_'
    (``Fan-v2.ncast`` gives ``fan_v2``), so that two models link into one firmware without
    clashes; ``model``, said in a warning, when that is not a valid C identifier."""
    from nodecast.compiler.backends.c_format import check_prefix

    stem = Path(model).name.rsplit(".", 1)[0] if "." in Path(model).name else Path(model).name
    tidy = re.sub(r"_+", "_", re.sub(r"[^a-z0-9_]", "_", stem.lower())).strip("_")
    try:
        return check_prefix(tidy)
    except NodecastError:
        warn(f"the C prefix is 'model': the bundle's name {stem!r} makes no valid C identifier "
             "(give --prefix to name the files and functions)")
        return "model"


def warn_other_c_models(folder: Path, prefix: str) -> None:
    """A warning when the folder also holds another model's generated C (an earlier emit under
    another prefix, such as the 'model' default of earlier versions): a build that lists those
    files would go on compiling the old model."""
    others = sorted(path.name for path in folder.glob("*.h") if path.stem != prefix
                    and (folder / f"{path.stem}.c").is_file()
                    and "Generated by nodecast" in path.read_text(errors="replace")[:2000])
    if others:
        warn(f"{folder} also holds {', '.join(others)} from another emit; remove it if your "
             f"build should compile {prefix}.c instead")

"""The ``nodecast`` command line. Parsing and printing only: the work happens in the modules it calls.

Exit status: 0 success, 1 a verification or score gate failed, 2 bad usage or bad input (one line on
stderr, no traceback). Heavy libraries (scikit-learn, onnx, onnxruntime) load inside the commands.
"""

from __future__ import annotations

import json
import signal
import sys
import threading
from pathlib import Path

import click

from nodecast.compiler.cli_score import score as score_command
from nodecast.compiler.cli_select import select as select_command
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.version import __version__

EXAMPLES = {
    "train": "nodecast train readings.csv --target heatsink_temp --nodes 300 -o fan.ncz",
    "predict": "nodecast predict fan.ncz readings.csv -o predictions.csv",
    "inspect": "nodecast inspect fan.ncz --precision float32",
    "emit": "nodecast emit fan.ncz --to onnx --precision float32 -o fan.onnx",
    "verify": "nodecast verify fan.ncz fan.onnx --data readings.csv --report verify.json",
    "demo": "nodecast demo -o demo-out",
}


def _epilog(name: str) -> str:
    return f"\b\nExample:\n  {EXAMPLES[name]}"


def parse_list(text: str | None, kind=str, option: str = "") -> tuple:
    if text is None:
        return ()
    items = [item.strip() for item in text.split(",") if item.strip()]
    try:
        return tuple(kind(item) for item in items)
    except ValueError:
        raise NodecastError(f"{option} takes a comma-separated list of {kind.__name__}, "
                            f"got {text!r}") from None


def parse_domain(text: str | None) -> dict[str, tuple[float, float]]:
    domain = {}
    for item in parse_list(text, option="--domain"):
        name, sep, bounds = item.rpartition("=")
        low, colon, high = bounds.partition(":")
        try:
            lo, hi = float(low), float(high)
        except ValueError:
            lo = hi = float("nan")
        if not sep or not colon or not name or not (lo <= hi):
            raise NodecastError(f"--domain takes NAME=LO:HI with LO <= HI, got {item!r}")
        domain[name] = (lo, hi)
    return domain


def parse_ridge(text: str) -> float | str:
    """--ridge: 'auto' or a finite number >= 0."""
    if text.strip().lower() == "auto":
        return "auto"
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (value >= 0 and value < float("inf")):
        raise NodecastError(f"--ridge takes 'auto' or a finite number >= 0, got {text!r}")
    return value


def parse_units(text: str | None) -> dict[str, str]:
    units = {}
    for item in parse_list(text, option="--units"):
        name, sep, unit = item.partition("=")
        if not sep or not name:
            raise NodecastError(f"--units takes NAME=UNIT, got {item!r}")
        units[name] = unit
    return units


def load_bundle(path):
    from nodecast.compiler.bundle import load

    return load(path)


@click.group(context_settings={"help_option_names": ["-h", "--help"], "max_content_width": 100})
@click.version_option(__version__, prog_name="nodecast")
def cli():
    """Train random-node networks and compile them into verified ONNX, C99 and Python artifacts.

    A fitted model is not a safety function: verify it on its declared input domain, guard inputs
    outside it, and follow the functional-safety standards, codes and licensed practice that apply.
    """


@cli.command(epilog=_epilog("train"))
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("--target", required=True, help="Target column(s), comma-separated.")
@click.option("--features", help="Feature columns (default: every other column).")
@click.option("--domain", help="Declared input domain, NAME=LO:HI,.. (default: the data's range).")
@click.option("--units", help="Units, NAME=UNIT,.. for features and targets.")
@click.option("--method", type=click.Choice(["data-driven", "interval", "domain-anchored"]),
              default="data-driven", show_default=True, help="Hidden-node generator.")
@click.option("--nodes", type=click.IntRange(min=1), default=200, show_default=True,
              help="Hidden nodes M.")
@click.option("--neighbors", type=click.IntRange(min=1), help="Neighbours k (default max(10, 2(n+1))).")
@click.option("--slope-scale", type=click.FloatRange(min=0, min_open=True), default=1.0,
              show_default=True, help="Slope-scale factor s of the data-driven nodes.")
@click.option("--interval", type=click.FloatRange(min=0, min_open=True), default=1.0,
              show_default=True, help="u of the U(-u, u) draws of the baseline generators.")
@click.option("--ridge", default="auto", show_default=True,
              help="Ridge lambda on the output weights, a number >= 0 (0: minimum-norm least "
                   "squares) or 'auto' (generalized cross-validation, float32-safe; see "
                   "docs/training.md).")
@click.option("--activation", type=click.Choice(["logistic", "tanh"]), default="logistic",
              show_default=True)
@click.option("--task", type=click.Choice(["regression", "classification"]), default="regression",
              show_default=True)
@click.option("--seed", type=int, default=0, show_default=True)
@click.option("--validation-fraction", type=click.FloatRange(0, 0.9), default=0.2, show_default=True,
              help="Share of rows held out for the reported validation error (the bundle's model "
                   "is fitted on all rows).")
@click.option("--chunk-rows", type=click.IntRange(min=1),
              help="Read DATA this many rows at a time, in memory that does not grow with the rows "
                   "(default: CSV files up to 32 MiB are read whole, larger ones and Parquet in "
                   "chunks of 50,000 rows; the model is the same).")
@click.option("--cluster", metavar="ADDRESS|local[:N]",
              help="Run the passes on a Dask cluster: a scheduler address, or local[:N] for a local "
                   "cluster of N workers (docs/scale.md).")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), help="Bundle (.ncz).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
def train(data, target, features, domain, units, method, nodes, neighbors, slope_scale, interval,
          ridge, activation, task, seed, validation_fraction, chunk_rows, cluster, output, overwrite):
    """Train a network on DATA (CSV, or Parquet by its .parquet suffix) and save it as a bundle."""
    from nodecast.compiler.bundle import save
    from nodecast.compiler.files import refuse_existing
    from nodecast.trainer.training import TrainingJob
    from nodecast.trainer.training import train as run_training

    refuse_existing(Path(output), overwrite)  # before training, not after minutes of it

    job = TrainingJob(
        targets=parse_list(target, option="--target"), features=parse_list(features, option="--features"),
        task=task, domain=parse_domain(domain), units=parse_units(units), seed=seed,
        validation_fraction=validation_fraction,
        params=dict(n_nodes=nodes, method=method, n_neighbors=neighbors, slope_scale=slope_scale,
                    interval=interval, ridge=parse_ridge(ridge), activation=activation))
    bundle = _train_from(data, job, chunk_rows, cluster, run_training)
    save(bundle, output, overwrite=overwrite)
    click.echo(f"wrote {output} (bundle {bundle.bundle_id[:12]}); {_metrics_line(bundle)}", err=True)


def _train_from(data, job, chunk_rows, cluster, run_training):
    """The bundle of ``train``: in memory, streamed from disk, or on a Dask cluster."""
    from nodecast.trainer.progress import Progress
    from nodecast.trainer.sources import MemorySource, open_source

    progress = Progress(sys.stderr if sys.stderr.isatty() else None)
    if cluster:
        from nodecast.trainer.distributed import train_on_cluster

        return train_on_cluster(data, job, cluster, chunk_rows, progress)
    source = open_source(data, chunk_rows)
    if isinstance(source, MemorySource):
        return run_training(source.table, job)
    from nodecast.trainer.streaming import train_streaming

    return train_streaming(source, job, progress)


def _metrics_line(bundle) -> str:
    metrics = bundle.metadata.get("metrics", {})
    parts = []
    for split in ("training", "validation"):
        values = metrics.get(split, {})
        if "rmse" in values:
            parts.append(f"{split} RMSE " + ", ".join(f"{v:.4g}" for v in values["rmse"]))
        if "accuracy" in values:
            parts.append(f"{split} accuracy {values['accuracy']:.4f}")
    return "; ".join(parts)


@cli.command(epilog=_epilog("predict"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.argument("data", type=click.Path(dir_okay=False))
@click.option("-o", "--output", type=click.Path(dir_okay=False), help="Output CSV (default stdout).")
@click.option("--scores", is_flag=True, help="Classifiers: add one score column per class.")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
def predict(model, data, output, scores, overwrite):
    """Predict with the float64 reference (the ground truth every artifact is checked against)."""
    import numpy as np

    from nodecast.compiler import reference
    from nodecast.compiler.csvio import read_table, write_table
    from nodecast.compiler.files import write_atomic

    net = load_bundle(model).network
    X = read_table(data).numbers(net.feature_names, allow_nonfinite=True)
    with np.errstate(over="ignore", invalid="ignore"):  # IEEE 754 results: docs/reliability.md
        Y = reference.predict(net, X)
    if net.task == "classification":
        labels = [net.class_labels[i] for i in Y.argmax(axis=1)]
        header = ["label"] + ([f"score:{name}" for name in net.target_names] if scores else [])
        rows = [[label] + (list(row) if scores else []) for label, row in zip(labels, Y, strict=True)]
    else:
        header, rows = list(net.target_names), Y.tolist()
    text = write_table(header, rows)
    if output:
        write_atomic(output, text.encode("utf-8"), overwrite=overwrite)
    else:
        sys.stdout.write(text)


@cli.command(epilog=_epilog("inspect"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--precision", type=click.Choice(["float64", "float32", "q31", "q15"]),
              help="Also estimate the export error in this precision.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of text.")
def inspect(model, precision, as_json):
    """Show a bundle: sizes, domain, metrics, node diagnostics and error estimates."""
    from nodecast.compiler.inspection import describe_bundle, format_description

    bundle = load_bundle(model)
    description = describe_bundle(bundle, precision)
    click.echo(json.dumps(description, indent=2, sort_keys=True) if as_json
               else format_description(description))


@cli.command(epilog=_epilog("emit"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--to", "target", required=True, type=click.Choice(["onnx", "c", "python"]))
@click.option("--precision", type=click.Choice(["float64", "float32", "q31", "q15"]),
              help="Arithmetic of the artifact (default: float32 for onnx and c, float64 for python).")
@click.option("--out-of-domain", type=click.Choice(["clamp", "pass", "reject"]), default="pass",
              show_default=True, help="What the artifact does with inputs outside the declared domain.")
@click.option("--flag-out-of-domain", is_flag=True, help="ONNX: add a boolean output per row.")
@click.option("--opset", type=int, help="ONNX operator set version (default: pinned newest).")
@click.option("--prefix", default="model", show_default=True, help="C: file and identifier prefix.")
@click.option("--activation-impl", type=click.Choice(["libm", "rational", "table"]),
              help="C: how tanh is evaluated (default: libm for float, table for q31/q15).")
@click.option("--table-size", type=click.IntRange(16, 65536),
              help="C, --activation-impl table: table intervals (default 512; q31 2048).")
@click.option("--bare-metal", is_flag=True,
              help="C: also write startup.c and mps2.ld, to run your own main.c bare metal on "
                   "QEMU's MPS2 Cortex-M3/M4 boards (the board support verify --emulate uses).")
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output file (onnx, python) or folder (c).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
@click.option("--max-artifact-size", "max_size",
              help="Refuse to write an artifact larger than this, in bytes or with K, M, G "
                   "(default 64M).")
def emit(model, target, precision, out_of_domain, flag_out_of_domain, opset, prefix, output, overwrite,
         max_size, activation_impl, table_size, bare_metal):
    """Compile a bundle into an artifact for a target."""
    from nodecast.compiler import emit as emit_artifact
    from nodecast.compiler.files import parse_size

    options = {"out_of_domain": out_of_domain}
    if precision:
        options["precision"] = precision
    if flag_out_of_domain:
        options["flag_out_of_domain"] = True
    if opset is not None:
        options["opset"] = opset
    if target == "c":
        options.update(prefix=prefix, activation_impl=activation_impl, table_size=table_size,
                       footprint=True, bare_metal=bare_metal)
    elif activation_impl or table_size or bare_metal:
        raise NodecastError("--activation-impl, --table-size and --bare-metal apply to --to c only")
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


def emitted_line(output, target: str, summary: dict) -> str:
    bound = max(summary["certificate"]["certified_bound"])
    typical = summary.get("estimate", {}).get("max_abs_error", float("nan"))
    return (f"wrote {output} ({target}, {summary.get('precision', '?')}); certified max abs error "
            f"{bound:.3g} (typical {typical:.3g})")


def budget_warning(bundle, summary: dict) -> str | None:
    """One line when the certified bound exceeds the default accuracy budget, else None."""
    from nodecast.compiler.bounds.budget import accuracy_budget

    budget = accuracy_budget(bundle)
    bound = summary["certificate"]["certified_bound"]
    over = budget.exceeded_by(bound)
    if not over:
        return None
    o = over[0]
    return (f"the certified bound {bound[o]:.3g} of output {o} exceeds the accuracy budget "
            f"{budget.per_output[o]:.3g} ({budget.rule}); verify will fail this artifact unless "
            "given --abs-tol")


@cli.command(epilog=_epilog("verify"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.argument("artifact", type=click.Path())
@click.option("--data", type=click.Path(dir_okay=False), help="Also probe the rows of this CSV.")
@click.option("--probes", type=click.IntRange(min=1), default=4096, show_default=True,
              help="Quasi-random probes in the declared domain.")
@click.option("--seed", type=int, default=0, show_default=True)
@click.option("--abs-tol", type=click.FloatRange(min=0), help="Tolerance in target units.")
@click.option("--rel-tol", type=click.FloatRange(min=0), help="Tolerance, share of the output range.")
@click.option("--report", type=click.Path(dir_okay=False), help="Write the JSON report here.")
@click.option("--junit", type=click.Path(dir_okay=False), help="Write a JUnit XML report here.")
@click.option("--emulate", type=click.Choice(["cortex-m3", "cortex-m4"]),
              help="C artifacts: run on an emulated Cortex-M (QEMU) instead of the host.")
def verify(model, artifact, data, probes, seed, abs_tol, rel_tol, report, junit, emulate):
    """Run ARTIFACT in its real runtime and compare it with the bundle's reference.

    Exit 0 when every probe family agrees within the tolerance, 1 when one does not, 2 on bad input.
    """
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import write_atomic
    from nodecast.compiler.verify import format_table
    from nodecast.compiler.verify import verify as run_verify
    from nodecast.compiler.verify.report import to_json, verify_junit

    bundle = load_bundle(model)
    rows = read_table(data).numbers(bundle.network.feature_names) if data else None
    run_options = {"emulate": emulate} if emulate else {}
    result = run_verify(bundle, artifact, rows, probes, seed, abs_tol, rel_tol, **run_options)
    click.echo(format_table(result))
    if report:
        write_atomic(report, to_json(result.as_dict()).encode("utf-8"), overwrite=True)
    if junit:
        write_atomic(junit, verify_junit(result.as_dict()).encode("utf-8"), overwrite=True)
    sys.exit(0 if result.passed else 1)


@cli.command(epilog=_epilog("demo"))
@click.option("-o", "--output", default="demo-out", show_default=True, type=click.Path(file_okay=False),
              help="Folder for the demo's data, bundle, artifacts and reports.")
@click.option("--data-only", is_flag=True,
              help="Only write the demo data (readings.csv, held_out.csv), for your own experiments.")
def demo(output, data_only):
    """Run the whole job on the built-in demo scenario (a cooling-fan controller).

    The scenario is invented: four sensor readings of a made-up power stage (ambient temperature,
    fan speed, load current, supply voltage) and its heatsink temperature, from a made-up formula
    plus noise.
    """
    from nodecast.compiler.demo import run_demo, write_data

    if data_only:
        write_data(Path(output))
        click.echo(f"wrote {Path(output) / 'readings.csv'} and {Path(output) / 'held_out.csv'}", err=True)
        return
    sys.exit(run_demo(Path(output), echo=click.echo))


cli.add_command(score_command)
cli.add_command(select_command)


def _stop_on_sigterm(signum, frame) -> None:
    # unwind like Ctrl-C, so that compiler/files.py removes any half-written temporary output
    raise SystemExit(128 + signum)


def main(argv=None) -> None:
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _stop_on_sigterm)
    try:
        cli.main(args=argv, prog_name="nodecast", standalone_mode=False)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        sys.exit(2)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(2)
    except NodecastError as exc:
        click.echo(f"nodecast: error: {' '.join(str(exc).split())}", err=True)
        sys.exit(2)
    except KeyboardInterrupt:
        click.echo("nodecast: interrupted", err=True)
        sys.exit(130)


if __name__ == "__main__":
    main()

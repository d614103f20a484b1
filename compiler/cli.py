"""The ``nodecast`` command line. Parsing and printing only: the work happens in the modules it calls.

Exit status: 0 success, 1 a verification or score gate failed, 2 bad usage or bad input (one line on
stderr, no traceback). Heavy libraries (scikit-learn, onnx, onnxruntime) load inside the commands.
"""

from __future__ import annotations

import json
import re
import signal
import sys
import threading
import warnings
from pathlib import Path

import click

from nodecast.compiler.cli_compare import compare as compare_command
from nodecast.compiler.cli_diff import diff as diff_command
from nodecast.compiler.cli_score import score as score_command
from nodecast.compiler.cli_select import select as select_command
from nodecast.compiler.cli_shrink import shrink as shrink_command
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.version import __version__

EXAMPLES = {
    "train": ("nodecast train readings.csv --target heatsink_temp --nodes 300 "
              "--domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,"
              "supply_voltage=22:26 -o fan.ncz"),
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


SEED = click.IntRange(0, 2**32 - 1)  # common practice for seeds; exact in every JSON reader


def parse_domain(text: str | None) -> dict[str, tuple[float, float]]:
    domain = {}
    for item in parse_list(text, option="--domain"):
        name, sep, bounds = item.rpartition("=")
        if name in domain:
            raise NodecastError(f"--domain names {name!r} twice; give each feature once")
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
        if name in units:
            raise NodecastError(f"--units names {name!r} twice; give each column once")
        units[name] = unit
    return units


def check_units(units: dict, table, job) -> None:
    """Refuse --units for a column that is neither a feature nor a target (a typo, most likely)."""
    from nodecast.trainer.training import feature_columns

    known = set(feature_columns(table.header, job)) | set(job.targets)
    unknown = [name for name in units if name not in known]
    if unknown:
        raise NodecastError(f"--units names {', '.join(map(repr, unknown))}, not a feature or "
                            "target column")


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
def train(data, target, features, domain, units, categorical, method, nodes, neighbors, slope_scale,
          interval, angle_range, weight_sum, ridge, activation, task, seed, validation_fraction,
          chunk_rows, cluster, output, overwrite):
    """Train a network on DATA (CSV, or Parquet by its .parquet suffix) and save it as a bundle."""
    from nodecast.compiler.bundle import save
    from nodecast.compiler.files import check_outputs
    from nodecast.compiler.progress import Progress, run_interruptible
    from nodecast.compiler.provenance import file_record, with_training_data
    from nodecast.trainer.cost import FitClock
    from nodecast.trainer.sources import MemorySource, open_source
    from nodecast.trainer.training import TrainingJob, heavy_tail_note
    from nodecast.trainer.training import train as run_training

    check_outputs({"-o": output}, {"DATA": data}, overwrite)  # before training, not after it

    job = TrainingJob(
        targets=parse_list(target, option="--target"), features=parse_list(features, option="--features"),
        task=task, domain=parse_domain(domain), units=parse_units(units), seed=seed,
        validation_fraction=validation_fraction,
        categorical=parse_list(categorical, option="--categorical"),
        params=dict(n_nodes=nodes, method=method, n_neighbors=_parse_neighbors(neighbors),
                    slope_scale=_parse_slope_scale(slope_scale), interval=interval,
                    angle_range=_parse_range(angle_range, "--angle-range"),
                    weight_sum=_parse_range(weight_sum, "--weight-sum"),
                    ridge=parse_ridge(ridge), activation=activation))
    source = None if cluster else open_source(data, chunk_rows)
    record = file_record(data)
    if source is None or not isinstance(source, MemorySource):
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
    click.echo(f"wrote {output} (bundle {bundle.bundle_id[:12]}); {_choice_line(bundle)}"
               f"{_metrics_line(bundle)}", err=True)
    note = heavy_tail_note(bundle.metadata)
    if note:
        click.echo(note, err=True)
    warn_rows_outside(bundle)


def _parse_neighbors(text: str):
    if text in ("auto", "default"):
        return None if text == "default" else "auto"
    if text.isdigit() and int(text) >= 1:
        return int(text)
    raise NodecastError(f"--neighbors takes a positive integer, 'default' or 'auto', got {text!r}")


def _parse_slope_scale(text: str):
    if text == "auto":
        return "auto"
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (0 < value < float("inf")):
        raise NodecastError(f"--slope-scale takes a finite positive number or 'auto', got {text!r}")
    return value


def _parse_range(text: str, option: str) -> tuple[float, float]:
    from nodecast.compiler.cli_grid import parse_pair

    try:
        return parse_pair(text)
    except ValueError:
        raise NodecastError(f"{option} takes LO:HI (two numbers), got {text!r}") from None


def _choice_line(bundle) -> str:
    """What the default search picked (train without --neighbors/--slope-scale)."""
    choice = bundle.metadata.get("layer_choice")
    if not choice:
        return ""
    k = bundle.metadata.get("diagnostics", {}).get("neighbors", choice["neighbors"])
    return (f"chose neighbors={k} slope_scale={choice['slope_scale']:g} by "
            f"generalized cross-validation over {len(choice['candidates'])} candidates; ")


def warn(text: str) -> None:
    click.echo(f"nodecast: warning: {text}", err=True)


def warn_more_nodes_than_rows(nodes: int, rows: int) -> None:
    """A warning when --nodes exceeds the rows (told when the first fit starts, after the data
    passed its checks; not for the default M, which is ours to choose)."""
    from nodecast.compiler.progress import format_seconds
    from nodecast.trainer.cost import fit_seconds

    if nodes > rows > 0:
        warn(f"{nodes} nodes for {rows} rows: nodes beyond the number of rows add time and "
             f"ill-conditioning, not accuracy (the fit can already pass through every row); "
             f"expect about {format_seconds(2 * fit_seconds(rows, nodes))} of training; "
             "consider --nodes below the row count, or nodecast select")


def warn_rows_outside(bundle) -> None:
    outside, rows = bundle.metadata.get("rows_outside_domain"), bundle.metadata.get("rows")
    if isinstance(outside, int) and outside > 0:
        warn(f"{outside} of {rows} training rows lie outside the declared --domain; the model is "
             "fitted to them too, but artifacts treat such inputs by their --out-of-domain policy")


def _train_scaled(data, source, job, chunk_rows, cluster):
    """The bundle of ``train`` streamed from disk (``source``) or on a Dask cluster (docs/scale.md)."""
    from nodecast.trainer.progress import Progress

    progress = Progress(sys.stderr if sys.stderr.isatty() else None)
    if cluster:
        from nodecast.trainer.distributed import train_on_cluster

        return train_on_cluster(data, job, cluster, chunk_rows, progress)
    from nodecast.trainer.streaming import train_streaming

    check_units(job.units, source, job)
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
@click.option("--keep", metavar="COL[,COL..]",
              help="Copy these input columns (an id, a timestamp) unchanged into the output, "
                   "before the predictions.")
@click.option("--overwrite", is_flag=True, help="Replace an existing output file.")
def predict(model, data, output, scores, keep, overwrite):
    """Predict with the float64 reference (the ground truth every artifact is checked against)."""
    import numpy as np

    from nodecast.compiler import reference
    from nodecast.compiler.csvio import read_table, write_table
    from nodecast.compiler.files import check_outputs, write_atomic
    from nodecast.compiler.levels import table_rows

    check_outputs({"-o": output}, {"MODEL": model, "DATA": data}, overwrite)
    net = load_bundle(model).network
    table = read_table(data)
    kept_names, kept = kept_columns(table, parse_list(keep, option="--keep"))
    X = table_rows(table, net, allow_nonfinite=True)
    with np.errstate(over="ignore", invalid="ignore"):  # IEEE 754 results: docs/reliability.md
        Y = reference.predict(net, X)
    if net.task == "classification":
        labels = [net.class_labels[i] for i in Y.argmax(axis=1)]
        header = ["label"] + ([f"score:{name}" for name in net.target_names] if scores else [])
        rows = [[label] + (list(row) if scores else []) for label, row in zip(labels, Y, strict=True)]
    else:
        header, rows = list(net.target_names), Y.tolist()
    clash = sorted(set(kept_names) & set(header))
    if clash:
        raise NodecastError(f"--keep {', '.join(map(repr, clash))}: the output already has a "
                            "column of that name; keep another column or rename it")
    text = write_table(kept_names + header, [k + r for k, r in zip(kept, rows, strict=True)])
    if output:
        write_atomic(output, text.encode("utf-8"), overwrite=overwrite)
    else:
        sys.stdout.write(text)


def kept_columns(table, names) -> tuple[list[str], list[list[str]]]:
    """predict --keep: the named columns' cells, copied as they are, per row."""
    if len(set(names)) != len(names):
        raise NodecastError("--keep names a column twice")
    indices = [table.column_index(name) for name in names]
    return list(names), [[row[i] for i in indices] for row in table.rows]


@cli.command(epilog=_epilog("inspect"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--precision", type=click.Choice(["float64", "float32", "q31", "q15"]),
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
        from nodecast.compiler.csvio import read_table
        from nodecast.compiler.plots import plot_bundle

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


@cli.command(epilog=_epilog("emit"))
@click.argument("model", type=click.Path(dir_okay=False))
@click.option("--to", "target", required=True, type=click.Choice(["onnx", "c", "python"]))
@click.option("--precision", type=click.Choice(["float64", "float32", "q31", "q15"]),
              help="Arithmetic of the artifact (default: float32 for onnx and c, float64 for python).")
@click.option("--out-of-domain", type=click.Choice(["clamp", "pass", "reject"]), default="pass",
              show_default=True, help="What the artifact does with inputs outside the declared domain.")
@click.option("--flag-out-of-domain", is_flag=True, help="ONNX: add a boolean output per row.")
@click.option("--opset", type=int,
              help="ONNX operator set version (default: the oldest this graph needs, 9, or 18 with "
                   "--flag-out-of-domain; see docs/onnx.md).")
@click.option("--prefix", default="model", show_default=True, help="C: file and identifier prefix.")
@click.option("--activation-impl", type=click.Choice(["libm", "rational", "table"]),
              help="C: how tanh is evaluated (default: rational for float32, libm for float64, "
                   "table for q31/q15).")
@click.option("--table-size", type=click.IntRange(16, 65536),
              help="C, --activation-impl table: table intervals (default 512; q31 2048).")
@click.option("--bare-metal", is_flag=True,
              help="C: also write startup.c and mps2.ld, to run your own main.c bare metal on "
                   "QEMU's MPS2 Cortex-M3/M4 boards (the board support verify --emulate uses).")
@click.option("--instruction-count/--no-instruction-count", default=True, show_default=True,
              help="C: count the instructions per prediction on emulated Cortex-M0 and M4F "
                   "(QEMU).")
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Output file (onnx, python) or folder (c).")
@click.option("--overwrite", is_flag=True, help="Replace existing output files.")
@click.option("--max-artifact-size", "max_size",
              help="Refuse to write an artifact larger than this, in bytes or with K, M, G "
                   "(default 64M).")
def emit(model, target, precision, out_of_domain, flag_out_of_domain, opset, prefix, output, overwrite,
         max_size, activation_impl, table_size, bare_metal, instruction_count):
    """Compile a bundle into an artifact for a target."""
    from nodecast.compiler import emit as emit_artifact
    from nodecast.compiler.files import check_outputs, parse_size

    check_outputs({"-o": output}, {"MODEL": model}, overwrite, folders=("-o",) if target == "c" else ())

    options = {"out_of_domain": out_of_domain}
    if precision:
        options["precision"] = precision
    if flag_out_of_domain:
        options["flag_out_of_domain"] = True
    if opset is not None:
        options["opset"] = opset
    if target == "c":
        options.update(prefix=prefix, activation_impl=activation_impl, table_size=table_size,
                       footprint=True, bare_metal=bare_metal, instruction_count=instruction_count)
    elif activation_impl or table_size or bare_metal:
        raise NodecastError("--activation-impl, --table-size and --bare-metal apply to --to c only")
    if flag_out_of_domain and target != "onnx":
        raise NodecastError(f"--flag-out-of-domain adds an output to an ONNX graph; the {target} "
                            "artifact handles inputs outside the domain by --out-of-domain")
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
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import check_outputs, write_atomic
    from nodecast.compiler.levels import table_rows
    from nodecast.compiler.progress import EngineClock, Progress
    from nodecast.compiler.verify import format_table
    from nodecast.compiler.verify import verify as run_verify
    from nodecast.compiler.verify.report import to_json, verify_junit

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
    if report:
        write_atomic(report, to_json(result.as_dict()).encode("utf-8"), overwrite=overwrite)
    if junit:
        write_atomic(junit, verify_junit(result.as_dict()).encode("utf-8"), overwrite=overwrite)
    sys.exit(0 if result.passed else 1)


@cli.command(epilog=_epilog("demo"))
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
    from nodecast.compiler.demo import check_demo_outputs, run_demo, write_data

    check_demo_outputs(Path(output), data_only, overwrite)
    if data_only:
        write_data(Path(output), overwrite)
        click.echo(f"wrote {Path(output) / 'readings.csv'} and {Path(output) / 'held_out.csv'}", err=True)
        return
    sys.exit(run_demo(Path(output), echo=click.echo, overwrite=overwrite))


cli.add_command(diff_command)
cli.add_command(score_command)
cli.add_command(select_command)
cli.add_command(compare_command)
cli.add_command(shrink_command)


def _stop_on_sigterm(signum, frame) -> None:
    # unwind like Ctrl-C, so that compiler/files.py removes any half-written temporary output
    raise SystemExit(128 + signum)


def usage_error_line(exc) -> str:
    """A usage error from the argument parser as one line: what is wrong and where to look."""
    command = exc.ctx.command_path if exc.ctx is not None else "nodecast"
    message = " ".join(exc.format_message().split())
    return f"nodecast: error: {message} (see '{command} --help')"


def main(argv=None) -> None:
    if threading.current_thread() is threading.main_thread():
        signal.signal(signal.SIGTERM, _stop_on_sigterm)
    from nodecast.compiler.terminal import EscapingStream

    streams = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = EscapingStream(sys.stdout), EscapingStream(sys.stderr)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            code = _run(argv)
        _show_warnings(caught, failed=bool(code))
    finally:
        sys.stdout, sys.stderr = streams
    if code is not None:  # a command that returns normally returns here too
        sys.exit(code)


def _run(argv) -> int | None:
    """The command's exit status (None: it returned normally); every error is one line."""
    try:
        cli.main(args=argv, prog_name="nodecast", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return exc.exit_code
    except SystemExit as exc:
        return exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    except click.exceptions.NoArgsIsHelpError as exc:  # bare `nodecast`: the help, as asked
        click.echo(exc.ctx.get_help(), err=True)
        return 2
    except click.UsageError as exc:  # one line, like every other error (docs/reliability.md)
        click.echo(usage_error_line(exc), err=True)
        return 2
    except click.ClickException as exc:
        click.echo(f"nodecast: error: {' '.join(exc.format_message().split())}", err=True)
        return 2
    except (click.exceptions.Abort, KeyboardInterrupt):  # click turns Ctrl-C into Abort
        click.echo("nodecast: interrupted", err=True)
        return 130
    except NodecastError as exc:
        click.echo(f"nodecast: error: {_plain_numbers(' '.join(str(exc).split()))}", err=True)
        return 2
    except MemoryError:
        click.echo("nodecast: error: out of memory; the input or the model is too large for this "
                   "machine", err=True)
        return 2
    return None


_NUMPY_REPR = re.compile(r"\bnp\.(?:float|int|uint|bool|complex)\w*\(([^()]*)\)")


def _plain_numbers(message: str) -> str:
    """A message with NumPy scalar reprs (``np.float64(0.5)``, NumPy 2) shown as plain numbers."""
    return _NUMPY_REPR.sub(r"\1", message)


def _show_warnings(caught, failed: bool) -> None:
    """Library warnings as one line each, after the command; none after an error (the error line
    says what matters). NumPy's floating-point RuntimeWarnings are dropped: results that overflow
    are checked and refused by the code that uses them."""
    if failed:
        return
    shown = set()
    for warning in caught:
        text = " ".join(str(warning.message).split())
        if issubclass(warning.category, RuntimeWarning) and "encountered in" in text:
            continue
        if text not in shown:
            shown.add(text)
            click.echo(f"nodecast: warning: {text}", err=True)


if __name__ == "__main__":
    main()

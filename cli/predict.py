"""nodecast predict: the float64 reference's predictions for the rows of a table."""

from __future__ import annotations

import sys

import click

from nodecast.cli.parsing import example, load_bundle, parse_list
from nodecast.compiler.errors import NodecastError


@click.command(epilog=example("predict"))
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

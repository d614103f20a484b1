"""Parsing of the command line's option values, one line of error for a bad value."""

from __future__ import annotations

import click

from nodecast.compiler.errors import NodecastError

EXAMPLES = {  # shown under each command's --help
    "train": ("nodecast train readings.csv --target heatsink_temp --nodes 300 "
              "--domain ambient_temp=10:45,fan_speed=800:4000,load_current=0:30,"
              "supply_voltage=22:26 -o fan.ncast"),
    "predict": "nodecast predict fan.ncast readings.csv -o predictions.csv",
    "inspect": "nodecast inspect fan.ncast --precision float32",
    "emit": "nodecast emit fan.ncast --to onnx --precision float32 -o fan.onnx",
    "verify": "nodecast verify fan.ncast fan.onnx --data readings.csv --report verify.json",
    "demo": "nodecast demo -o demo-out",
}



def example(name: str) -> str:
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


def parse_neighbors(text: str):
    if text in ("auto", "default"):
        return None if text == "default" else "auto"
    if text.isdigit() and int(text) >= 1:
        return int(text)
    raise NodecastError(f"--neighbors takes a positive integer, 'default' or 'auto', got {text!r}")


def parse_slope_scale(text: str):
    if text == "auto":
        return "auto"
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (0 < value < float("inf")):
        raise NodecastError(f"--slope-scale takes a finite positive number or 'auto', got {text!r}")
    return value


def parse_range(text: str, option: str) -> tuple[float, float]:
    from nodecast.cli.grid import parse_pair

    try:
        return parse_pair(text)
    except ValueError:
        raise NodecastError(f"{option} takes LO:HI (two numbers), got {text!r}") from None


def parse_limits(text: str | None, option: str) -> tuple[float, ...] | None:
    """A gate's limit: one finite number >= 0, or one per output, comma-separated."""
    if text is None:
        return None
    try:
        values = tuple(float(item) for item in text.split(",") if item.strip())
    except ValueError:
        values = ()
    if not values or any(not (0 <= v < float("inf")) for v in values):
        raise NodecastError(f"{option} takes a number >= 0 or one per output, comma-separated, "
                            f"got {text!r}")
    return values


DEFAULT_FOLDS = 10


def with_enough_folds(run, folds: int | None):
    """``run(folds)`` with ``--folds`` as given; by default (None) with ``DEFAULT_FOLDS`` or, where
    the hashed folds leave one without rows or training rows (small or very repetitive data: a
    row's fold is a hash of its values), the largest smaller count that does not, said on stderr."""
    from nodecast.cli.messages import warn
    from nodecast.trainer.folds import FoldSizeError

    if folds is not None:
        return run(folds)
    first = None
    for count in range(DEFAULT_FOLDS, 1, -1):
        try:
            result = run(count)
        except FoldSizeError as exc:
            first = first or exc
            continue
        if count < DEFAULT_FOLDS:
            warn(f"with {DEFAULT_FOLDS} hashed folds {first.where}; used {count} folds "
                 "(--folds sets them)")
        return result
    raise first


def check_scaling(chunk_rows, cluster) -> None:
    """``--chunk-rows`` is for one process: a cluster's partitions are 64 MiB blocks of a CSV file
    or a Parquet file's row groups (docs/scale.md)."""
    if chunk_rows is not None and cluster:
        raise NodecastError("--chunk-rows is for one process; with --cluster the partitions are "
                            "64 MiB blocks of a CSV file or the row groups of a Parquet file")

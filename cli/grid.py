"""The grid options that ``select`` and ``compare`` share: each generator's own hyper-parameters.

Parsing only; what each option sets and its default grid are in
:mod:`nodecast.trainer.method_grid`.
"""

from __future__ import annotations

import click

from nodecast.compiler.errors import NodecastError

METHODS = ("data-driven", "interval", "domain-anchored", "slope-angle", "weight-sum")


def grid_options(command):
    """Add --neighbors, --slope-scales, --intervals, --angle-ranges and --weight-sums."""
    options = [
        click.option("--neighbors", help="data-driven: neighbours k to try; 'default' is "
                                         "max(10, 2(n+1)).  [default: default]"),
        click.option("--slope-scales", help="data-driven: slope scales s to try.  [default: 1]"),
        click.option("--intervals", help="interval, domain-anchored: u of U(-u, u) to try.  "
                                         "[default: 0.1,0.3,1,3,10,30]"),
        click.option("--angle-ranges", help="slope-angle: slope-angle ranges LO:HI in degrees to "
                                            "try.  [default: 0:20,0:45,0:70,0:85,0:88]"),
        click.option("--weight-sums", help="weight-sum: ranges R:S of the sum of weight magnitudes "
                                           "to try.  [default: 0.5:2.5,1:5,2:10,5:25,10:50]"),
    ]
    for option in reversed(options):
        command = option(command)
    return command


def search_options(command):
    """Add the options select and compare share: --nodes, the generators' grids (grid_options),
    --ridge, --folds and --activation."""
    options = [
        click.option("--nodes", default="50,100,250", show_default=True,
                     help="Hidden nodes M to try."),
        grid_options,
        click.option("--ridge", default="0,1e-6", show_default=True,
                     help="Ridge values lambda to try (0: minimum-norm least squares)."),
        click.option("--folds", type=click.IntRange(min=2),
                     help="Cross-validation folds (a row's fold: a hash of its input values, so "
                          "copies of a row share one). Default: 10, or fewer where 10 leave a "
                          "fold empty (small or repetitive data; said on stderr)."),
        click.option("--activation", type=click.Choice(["logistic", "tanh"]), default="logistic",
                     show_default=True),
    ]
    for option in reversed(options):
        command = option(command)
    return command


def layer_values(neighbors, slope_scales, intervals, angle_ranges, weight_sums) -> dict:
    """The values of each generator parameter given on the command line (None: not given)."""
    return {"n_neighbors": _list(neighbors, "--neighbors", _neighbor, "integers or 'default'"),
            "slope_scale": _list(slope_scales, "--slope-scales", float, "numbers"),
            "interval": _list(intervals, "--intervals", float, "numbers"),
            "angle_range": _list(angle_ranges, "--angle-ranges", parse_pair, "LO:HI pairs"),
            "weight_sum": _list(weight_sums, "--weight-sums", parse_pair, "R:S pairs")}


def parse_methods(text: str, allowed=METHODS) -> list[str]:
    methods = list(dict.fromkeys(item.strip() for item in text.split(",") if item.strip()))
    for method in methods:
        if method not in allowed:
            raise NodecastError(f"--method takes a comma-separated list of {', '.join(allowed)}; "
                                f"got {method!r}")
    if not methods:
        raise NodecastError("--method needs at least one generator")
    return methods


def parse_pair(text: str) -> tuple[float, float]:
    """'LO:HI' -> (LO, HI) as floats; ValueError otherwise."""
    low, colon, high = text.partition(":")
    if not colon:
        raise ValueError(text)
    return float(low), float(high)


def _neighbor(text: str):
    return None if text == "default" else int(text)


def _list(text, option: str, kind, rule: str):
    if text is None:
        return None
    values = []
    for item in (item.strip() for item in text.split(",")):
        if not item:
            continue
        try:
            values.append(kind(item))
        except ValueError:
            raise NodecastError(f"{option} takes {rule}, comma-separated; got {item!r}") from None
    return values

"""One option spec per target: what ``emit`` accepts for ONNX, C and Python, and its defaults.

The CLI builds its choices from these specs (``nodecast.cli.emit``), :func:`nodecast.compiler.emit`
validates the Python API's options with them (an unknown option raises, it is never dropped), and
docs/cli-reference.md is generated from the CLI. Defaults may depend on the precision: fixed point
holds only the declared domain, so its out-of-domain policy defaults to ``clamp``.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

from nodecast.compiler.errors import NodecastError

FLOAT_PRECISIONS = ("float64", "float32")
FIXED_PRECISIONS = ("q31", "q15")
PRECISIONS = FLOAT_PRECISIONS + FIXED_PRECISIONS
UNIT_ROUNDOFF = {"float64": 2.0**-53, "float32": 2.0**-24}  # IEEE 754: u = eps / 2
OUT_OF_DOMAIN_POLICIES = ("clamp", "pass", "reject")
ACTIVATION_IMPLS = ("libm", "rational", "table")
TABLE_SIZE_RANGE = (16, 65536)


@dataclass(frozen=True)
class Option:
    """One option of a target: ``choices`` (a tuple) or an integer ``value_range`` (inclusive), or
    neither for a free value (a flag, a name); ``default`` is the value when none is given."""

    name: str
    default: object = None
    choices: tuple | None = None
    value_range: tuple[int, int] | None = None
    note: str = ""  # why the choices are what they are, said when a value is refused

    def check(self, value, target: str) -> None:
        flag = "--" + self.name.replace("_", "-")
        if self.choices is not None and value not in self.choices:
            note = f" ({self.note})" if self.note else ""
            raise NodecastError(f"{target} takes {flag} {', '.join(map(str, self.choices))}, "
                                f"not {value!r}{note}")
        if self.value_range is not None:
            low, high = self.value_range
            if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
                raise NodecastError(f"{target} takes {flag} an integer {low}..{high}, not {value!r}")


@dataclass(frozen=True)
class TargetSpec:
    """The options of one target and how their defaults follow the precision."""

    name: str
    precisions: tuple[str, ...]
    default_precision: str
    options: tuple[Option, ...]
    precision_note: str = ""

    def option(self, name: str) -> Option | None:
        return next((o for o in self.options if o.name == name), None)

    @property
    def names(self) -> tuple[str, ...]:
        return ("precision", *(o.name for o in self.options))

    def resolve(self, options: dict) -> dict:
        """``options`` checked and completed with defaults; an unknown or misspelt option raises."""
        unknown = [name for name in options if name not in self.names]
        if unknown:
            raise foreign_option_error(self.name, unknown[0])
        precision = options.get("precision") or self.default_precision
        if precision not in self.precisions:
            note = f" ({self.precision_note})" if self.precision_note else ""
            raise NodecastError(f"{self.name} takes precision {', '.join(self.precisions)} only, "
                                f"not {precision!r}{note}")
        resolved = {"precision": precision}
        for option in self.options:
            value = options.get(option.name)
            if value is None:
                value = self.default(option, precision)
            if value is not None:
                option.check(value, self.name)
            resolved[option.name] = value
        return resolved

    def default(self, option: Option, precision: str):
        if option.name == "out_of_domain" and precision in FIXED_PRECISIONS:
            return "clamp"  # integers hold the declared domain only
        if option.name == "activation_impl" and self.name == "c":
            return {"float32": "rational", "float64": "libm"}.get(precision, "table")
        return option.default


_POLICY = Option("out_of_domain", "pass", OUT_OF_DOMAIN_POLICIES)

TARGETS: dict[str, TargetSpec] = {
    "onnx": TargetSpec("onnx", FLOAT_PRECISIONS, "float32", (
        Option("out_of_domain", "pass", ("clamp", "pass"),
               note="a graph cannot refuse a row; use --flag-out-of-domain to mark them"),
        Option("flag_out_of_domain", False, (False, True)),
        Option("opset"),  # checked by the back-end against the opsets it can write
    )),
    "c": TargetSpec("c", PRECISIONS, "float32", (
        _POLICY,
        Option("prefix", "model"),
        Option("activation_impl", None, ACTIVATION_IMPLS),
        Option("table_size", None, value_range=TABLE_SIZE_RANGE),
        Option("footprint", False, (False, True)),
        Option("bare_metal", False, (False, True)),
        Option("instruction_count", False, (False, True)),
    )),
    "python": TargetSpec("python", ("float64",), "float64", (_POLICY,),
                         precision_note="Python floats are IEEE 754 binary64"),
}


def foreign_option_error(target: str, name: str) -> NodecastError:
    """The error for an option ``target`` does not take: another target's option is named as
    such; anything else gets the closest option name, if any."""
    flag = "--" + name.replace("_", "-")
    if name == "flag_out_of_domain":
        return NodecastError(f"{flag} adds an output to an ONNX graph; the {target} artifact "
                             "handles inputs outside the domain by --out-of-domain")
    takers = [t for t, spec in TARGETS.items() if name in spec.names]
    if takers:
        return NodecastError(f"{flag} applies to --to {' and '.join(takers)} only")
    names = TARGETS[target].names
    close = difflib.get_close_matches(name, names, n=1)
    hint = f" (did you mean {close[0]!r}?)" if close else ""
    return NodecastError(f"the {target} target has no option {name!r}{hint}; it takes "
                         f"{', '.join(names)}")


def target_spec(to: str) -> TargetSpec:
    if to not in TARGETS:
        raise NodecastError(f"unknown target {to!r}; choose one of: {', '.join(TARGETS)}")
    return TARGETS[to]


def all_choices(option: str) -> tuple:
    """Every value any target accepts for ``option`` (the CLI's choices), in the specs' order."""
    values: list = []
    for spec in TARGETS.values():
        found = spec.precisions if option == "precision" else (spec.option(option) or Option("")).choices
        values += [v for v in found or () if v not in values]
    return tuple(values)

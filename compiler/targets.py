"""One option spec per target: what ``emit`` accepts for ONNX, C and Python, and its defaults.

The CLI builds its choices and the defaults in its help from these specs (``nodecast.cli.emit``),
:func:`nodecast.compiler.emit` validates the Python API's options with them (an unknown option
raises, it is never dropped), and docs/cli-reference.md's option tables are generated from them.
Values and defaults may depend on the precision: fixed point holds only the declared domain, so it
takes ``clamp`` (its default) or ``reject``, and evaluates its activation from a table.
"""

from __future__ import annotations

import difflib
import numbers
from dataclasses import dataclass, field

from nodecast.compiler.errors import NodecastError

FLOAT_PRECISIONS = ("float64", "float32")
FIXED_PRECISIONS = ("q31", "q15")
PRECISIONS = FLOAT_PRECISIONS + FIXED_PRECISIONS
UNIT_ROUNDOFF = {"float64": 2.0**-53, "float32": 2.0**-24}  # IEEE 754: u = eps / 2
OUT_OF_DOMAIN_POLICIES = ("clamp", "pass", "reject")
ACTIVATION_IMPLS = ("libm", "rational", "table")
TABLE_SIZE_RANGE = (16, 65536)
ONNX_OPSET_RANGE = (9, 28)  # the opsets whose IR version the ONNX back-end knows


@dataclass(frozen=True)
class Option:
    """One option of a target.

    ``kind`` is "choice" (one of ``choices``), "int" (an integer in ``value_range``), "flag" (a
    bool) or "text" (checked by the back-end, such as a C prefix). ``default`` is the value when
    none is given, or, per precision, ``default_for[precision]``. ``narrow[precision]`` is the
    subset of ``choices`` that precision takes; ``requires`` = (option, value) names another
    option's value this one needs. ``api_only``: the command line sets it itself."""

    name: str
    kind: str = "choice"
    default: object = None
    choices: tuple = ()
    value_range: tuple[int, int] | None = None
    default_for: dict = field(default_factory=dict)
    narrow: dict = field(default_factory=dict)
    requires: tuple | None = None
    note: str = ""  # why the values are what they are, said when a value is refused
    api_only: bool = False

    @property
    def flag(self) -> str:
        return "--" + self.name.replace("_", "-")

    def allowed(self, precision: str) -> tuple:
        return self.narrow.get(precision, self.choices)

    def default_value(self, precision: str):
        return self.default_for.get(precision, self.default)

    def check(self, value, target: str, precision: str) -> None:
        note = f" ({self.note})" if self.note else ""
        if self.kind == "choice" and not self.allowed(precision):
            raise NodecastError(f"{target} takes no {self.flag} at {precision}{note}")
        if self.kind == "choice" and value not in self.allowed(precision):
            given = "" if self.allowed(precision) == self.choices else f" at {precision}"
            raise NodecastError(f"{target} takes {self.flag} "
                                f"{', '.join(map(str, self.allowed(precision)))}{given}, "
                                f"not {value!r}{note}")
        if self.kind == "int":
            low, high = self.value_range
            if isinstance(value, bool) or not isinstance(value, numbers.Integral) \
                    or not low <= value <= high:
                raise NodecastError(f"{target} takes {self.flag} an integer {low}..{high}, "
                                    f"not {value!r}{note}")
        if self.kind == "flag" and not isinstance(value, bool):
            raise NodecastError(f"{target} takes {self.flag} True or False, not {value!r}")


@dataclass(frozen=True)
class TargetSpec:
    """The options of one target and how their values and defaults follow the precision."""

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
        """``options`` checked and completed with defaults; an unknown or misspelt option, a value
        the precision does not take, or an option without the one it requires raises."""
        unknown = [name for name in options if name not in self.names]
        if unknown:
            raise foreign_option_error(self.name, unknown[0])
        precision = options.get("precision")
        precision = self.default_precision if precision is None else precision
        if precision not in self.precisions:
            note = f" ({self.precision_note})" if self.precision_note else ""
            raise NodecastError(f"{self.name} takes precision {', '.join(self.precisions)} only, "
                                f"not {precision!r}{note}")
        resolved = {"precision": precision}
        for option in self.options:
            given = options.get(option.name)
            value = option.default_value(precision) if given is None else given
            if value is not None:
                option.check(value, self.name, precision)
                value = int(value) if option.kind == "int" else value  # NumPy integers too
            resolved[option.name] = value
        for option in self.options:
            if option.requires and resolved[option.requires[0]] != option.requires[1]:
                if options.get(option.name) is not None:
                    other, wanted = option.requires
                    raise NodecastError(f"{option.flag} applies to --{other.replace('_', '-')} "
                                        f"{wanted} only")
                resolved[option.name] = None  # its default means nothing without the other
        return resolved

    def default_text(self, option: Option) -> str:
        """The default, or one per group of precisions when it follows the precision."""
        by_value: dict = {}
        for precision in self.precisions:
            by_value.setdefault(option.default_value(precision), []).append(precision)
        if len(by_value) == 1:
            return str(next(iter(by_value)))
        return "; ".join(f"{value} ({', '.join(group)})" for value, group in by_value.items())

    def values_text(self, option: Option) -> str:
        """The values taken, per group of precisions when they follow the precision."""
        if option.kind == "int":
            return "an integer {}..{}".format(*option.value_range)
        if option.kind != "choice":
            return "True, False" if option.kind == "flag" else option.note
        by_values: dict = {}
        for precision in self.precisions:
            by_values.setdefault(option.allowed(precision), []).append(precision)
        if len(by_values) == 1:
            return ", ".join(map(str, option.choices))
        return "; ".join(f"{', '.join(map(str, values))} ({', '.join(group)})"
                         for values, group in by_values.items())


_FIXED_POLICIES = {p: ("clamp", "reject") for p in FIXED_PRECISIONS}
_POLICY_NOTE = "fixed point holds the declared domain only, so inputs outside it cannot pass"

TARGETS: dict[str, TargetSpec] = {
    "onnx": TargetSpec("onnx", FLOAT_PRECISIONS, "float32", (
        Option("out_of_domain", default="pass", choices=("clamp", "pass"),
               note="a graph cannot refuse a row; use --flag-out-of-domain to mark them"),
        Option("flag_out_of_domain", kind="flag", default=False),
        Option("opset", kind="int", value_range=ONNX_OPSET_RANGE,
               note="default: the oldest the graph needs"),
    )),
    "c": TargetSpec("c", PRECISIONS, "float32", (
        Option("out_of_domain", default="pass", choices=OUT_OF_DOMAIN_POLICIES,
               default_for={p: "clamp" for p in FIXED_PRECISIONS}, narrow=_FIXED_POLICIES,
               note=_POLICY_NOTE),
        Option("prefix", kind="text", default="model", note="a C identifier, checked by the back-end"),
        Option("activation_impl", choices=ACTIVATION_IMPLS,
               default_for={"float64": "libm", "float32": "rational", "q31": "table",
                            "q15": "table"},
               narrow={p: ("table",) for p in FIXED_PRECISIONS},
               note="fixed point evaluates its activation from a table"),
        Option("table_size", kind="int", value_range=TABLE_SIZE_RANGE,
               default_for={"float64": 512, "float32": 512, "q31": 2048, "q15": 512},
               requires=("activation_impl", "table")),
        Option("scales", choices=("node", "layer"), default_for={p: "node" for p in FIXED_PRECISIONS},
               narrow={p: () for p in FLOAT_PRECISIONS},
               note="fixed-point scales: one Q format per hidden node or per layer, q31/q15 only"),
        Option("footprint", kind="flag", default=False, api_only=True),
        Option("bare_metal", kind="flag", default=False),
        Option("instruction_count", kind="flag", default=False),
    )),
    "python": TargetSpec("python", ("float64",), "float64", (
        Option("out_of_domain", default="pass", choices=OUT_OF_DOMAIN_POLICIES),),
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
        found = spec.precisions if option == "precision" else getattr(spec.option(option),
                                                                      "choices", ())
        values += [v for v in found if v not in values]
    return tuple(values)

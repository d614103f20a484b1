"""Python back-end: one standalone predictor file that needs nothing but the standard library.

The file holds the network as literals (``repr`` of every float64, so each weight round-trips
exactly), evaluates it with the fastest exact formulation the running interpreter offers
(``math.sumprod`` on Python 3.12+, ``map(sum, map(map, ...))`` before; see
``tests/benchmarks/python_predictor.py``), and doubles as a CSV command line tool.

Logistic networks are evaluated as ``logistic(z) = 1/2 + tanh(z / 2) / 2``, never with ``exp``, so
no finite input can overflow. Both halvings are folded into the weights, which is exact in binary
floating point (a power-of-two scaling), and the constant halves into the output bias as one
exactly rounded sum (``math.fsum``): the hidden layer then costs one ``tanh`` per node and nothing
else, and measures as accurate as the reference's own form (see the benchmark).

Safety of user text: every name, unit and label enters the file through ``repr`` (code) or
through :func:`docstring_lines` (the provenance docstring), never pasted raw; the template holds
layout only.
"""

from __future__ import annotations

import numpy as np

from nodecast.compiler.backends import Artifact
from nodecast.compiler.bounds import certify
from nodecast.compiler.passes.half_tanh import logistic_as_tanh
from nodecast.compiler.typical_error import estimate
from nodecast.compiler.version import __version__
from nodecast.templates import render as render_template

FILE_NAME = "predictor.py"
TEMPLATE = "predictor.py.j2"
LINE_LIMIT = 100  # pyproject [tool.ruff] line-length: the generated file passes ruff as it is
_NOQA_LONG_LINE = "  # noqa: E501"


def render(bundle, precision: str = "float64", out_of_domain: str = "pass") -> Artifact:
    """Render ``bundle`` as ``predictor.py``.

    Parameters
    ----------
    bundle : Bundle
    precision : "float64", the only one Python floats (IEEE 754 binary64) offer.
    out_of_domain : "clamp", "pass" or "reject", what the predictor does with inputs outside
        the declared domain.
    """
    net = bundle.network
    error = estimate(net, precision)
    certificate = certify(net, "python", precision)
    text = render_template("python", TEMPLATE, **_context(bundle, error, out_of_domain, certificate))
    data = text.encode("utf-8")
    summary = {"precision": precision, "out_of_domain": out_of_domain, "estimate": error.as_dict(),
               "certificate": certificate.as_dict(),
               "bytes": len(data), "nodes": net.n_nodes, "features": net.n_features,
               "outputs": net.n_outputs}
    return Artifact("python", {FILE_NAME: data}, True, summary)


def _context(bundle, error, out_of_domain: str, certificate) -> dict:
    net = bundle.network
    logistic = net.activation == "logistic"
    lowered = logistic_as_tanh(net)
    hidden = np.column_stack([lowered.hidden_weights, lowered.hidden_biases])
    context = {
        "tool_version": repr(__version__), "bundle_id": repr(bundle.bundle_id),
        "out_of_domain": repr(out_of_domain), "policy": out_of_domain, "task": repr(net.task),
        "classifier": net.task == "classification", "activation": repr(net.activation),
        "logistic": logistic, "n_features": net.n_features, "n_outputs": net.n_outputs,
        "hidden": float_rows(hidden), "output_weights": float_rows(lowered.output_weights.T),
        "output_bias": float_tuple(lowered.output_bias),
        "error_estimate": float_tuple(error.per_output),
        "certified_bound": float_tuple(certificate.per_output),
        "bound_assumes": repr(certificate.assumption),
        "docstring": _docstring(bundle, error, out_of_domain, certificate),
    }
    for name in ("feature_names", "feature_units", "target_names", "target_units", "class_labels"):
        context[name] = text_tuple(getattr(net, name))
    context.update(_categorical_context(lowered))
    for name in ("domain_low", "domain_high", "input_offset", "input_scale", "output_offset",
                 "output_scale"):
        context[name] = float_tuple(getattr(net, name))
    return context


def _categorical_context(net) -> dict:
    """The categorical constants of the lowered network: names, levels, each level's vector."""
    if not net.n_categorical:
        return {"categorical": False}
    groups = []
    for c, levels in enumerate(net.categorical_levels):
        start = net.level_start(c)
        rows = [f"        {float_tuple(vector, indent=12)}," for vector in
                net.level_weights[start : start + len(levels)]]
        groups.append("    (\n" + "\n".join(rows) + "\n    ),")
    levels = [f"    {text_tuple(group).replace(chr(10), chr(10) + '    ')}," for group in
              net.categorical_levels]
    return {"categorical": True, "n_categorical": net.n_categorical,
            "categorical_names": text_tuple(net.categorical_names),
            "categorical_levels": "(\n" + "\n".join(levels) + "\n)",
            "level_weights": "(\n" + "\n".join(groups) + "\n)"}


def float_tuple(values, indent: int = 4) -> str:
    """A tuple literal of floats (``repr``, exact round trip), wrapped within ``LINE_LIMIT``."""
    lines = _packed([repr(float(v)) + "," for v in np.asarray(values, dtype=np.float64).ravel()],
                    " " * indent)
    return "(\n" + "\n".join(lines) + "\n" + " " * (indent - 4) + ")"


def float_rows(matrix) -> str:
    """A tuple literal of tuple rows of floats, one row per inner tuple."""
    rows = ["    " + float_tuple(row, indent=8) + "," for row in np.atleast_2d(matrix)]
    return "(\n" + "\n".join(rows) + "\n)"


def _packed(items: list[str], indent: str) -> list[str]:
    lines, line = [], indent
    for item in items:
        if line != indent and len(line) + 1 + len(item) > LINE_LIMIT:
            lines.append(line)
            line = indent
        line += item if line == indent else " " + item
    return lines + [line] if line != indent else lines


def text_tuple(values) -> str:
    """A tuple literal of strings, each rendered by ``repr``, one per line."""
    lines = []
    for value in values:
        line = "    " + repr(str(value)) + ","
        lines.append(line + _NOQA_LONG_LINE if len(line) > LINE_LIMIT else line)
    return "(\n" + "\n".join(lines) + "\n)" if lines else "()"


def docstring_escape(text: str) -> str:
    """``text`` made safe inside a triple-quoted (non-raw) string: backslashes, quotes escaped."""
    return text.replace("\\", "\\\\").replace('"', '\\"')


def docstring_lines(text: str, first: str = "", rest: str = "") -> list[str]:
    """Escape ``text`` for the docstring and wrap it at spaces within ``LINE_LIMIT``.

    ``first`` and ``rest`` indent the first and the following lines. A word longer than a line is
    cut between escape units (never inside ``\\\\`` or ``\\"``), so wrapping cannot change what
    the escapes mean.
    """
    lines, line, fresh = [], first, True
    for word in (docstring_escape(w) for w in text.split(" ")):
        if not fresh and len(line) + 1 + len(word) > LINE_LIMIT:
            lines.append(line)
            line, fresh = rest, True
        line = line + word if fresh else f"{line} {word}"
        fresh = False
        while len(line) > LINE_LIMIT:
            cut = LINE_LIMIT - _open_escape(line, LINE_LIMIT)
            lines.append(line[:cut])
            line = rest + line[cut:]
    return [entry.rstrip() for entry in lines + [line]]


def _open_escape(line: str, end: int) -> int:
    """1 if ``line[end - 1]`` opens a two-character escape (an odd run of backslashes), else 0."""
    head = line[:end]
    return (len(head) - len(head.rstrip("\\"))) % 2


def _docstring(bundle, error, out_of_domain: str, certificate) -> dict:
    net = bundle.network
    features = []
    for i, (name, unit, lo, hi) in enumerate(zip(net.feature_names, net.feature_units,
                                                 net.domain_low, net.domain_high, strict=True)):
        features += docstring_lines(f"{i:<3} {name!r}, unit {unit!r}, domain {float(lo)!r} .. "
                                    f"{float(hi)!r}", "    ", "        ")
    outputs = []
    rows = zip(net.target_names, net.target_units, certificate.per_output, error.per_output,
               strict=True)
    for i, (name, unit, bound, err) in enumerate(rows):
        label = f", class label {net.class_labels[i]!r}" if net.task == "classification" else ""
        outputs += docstring_lines(f"{i:<3} {name!r}, unit {unit!r}{label}, certified max abs "
                                   f"error {bound:.3g}, typical {err:.3g}", "    ", "        ")
    categorical = []
    for i, (name, levels) in enumerate(zip(net.categorical_names, net.categorical_levels,
                                           strict=True)):
        categorical += docstring_lines(f"{net.n_features + i:<3} {name!r}, levels "
                                       f"{', '.join(map(repr, levels))}", "    ", "        ")
    example = [float(v) for v in (net.domain_low + net.domain_high) / 2]
    example += [levels[0] for levels in net.categorical_levels]
    return {
        "features": features, "outputs": outputs, "categorical": categorical,
        "example": docstring_lines(f"predictor.predict({example!r})", "    ", "        "),
        "nodes": net.n_nodes, "activation": net.activation, "policy": out_of_domain,
        "bundle_id": bundle.bundle_id, "version": __version__,
        "assumes": docstring_escape(certificate.assumption), "probes": error.probes,
    }

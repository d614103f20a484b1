"""C back-end: a header and a source in C99 that read like a small hand-written library.

``render`` validates the options, lowers the network once (q15/q31: the quantisation pass
:func:`nodecast.compiler.passes.quantise.make_plan`, whose plan the estimate and the certified
bound reuse), formats every number and every piece of user text in Python
(:mod:`~nodecast.compiler.backends.c_format`, the header's prose in
:mod:`~nodecast.compiler.backends.c_header`) and fills the templates ``templates/c/model.h.j2``
and ``model_float.c.j2`` or ``model_fixed.c.j2``. The float32/float64 layout lives in
:mod:`~nodecast.compiler.backends.c_float`, the q15/q31 one in
:mod:`~nodecast.compiler.backends.c_fixed`. The footprint (sizes and stack on the host and on Cortex-M)
is measured by :mod:`nodecast.compiler.toolchain` when asked for, the instructions per prediction
on emulated Cortex-M cores by :mod:`nodecast.compiler.instruction_count`.
"""

from __future__ import annotations

from nodecast.compiler import typical_error
from nodecast.compiler.backends import Artifact
from nodecast.compiler.backends import c_header as text
from nodecast.compiler.backends.c_board import board_files
from nodecast.compiler.backends.c_fixed import fixed_context
from nodecast.compiler.backends.c_float import float_context
from nodecast.compiler.backends.c_format import (
    _with_point,
    c_comment,
    c_string,
    check_prefix,
    double_literal,
)
from nodecast.compiler.bounds import certify
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import FIXED_PRECISIONS, TARGETS
from nodecast.compiler.version import __version__

_IMPL_TEXT = {
    "libm": "the C library's {fn}",
    "rational": "a rational approximation x P(x^2)/Q(x^2), clipped at |x| = 9 (no libm)",
    "table": "a {size}-interval table with linear interpolation (no libm)",
}
_POLICY_TEXT = {
    "pass": "pass: inputs outside the domain are evaluated as given (the estimate covers the "
            "domain only)",
    "clamp": "clamp: each input is clipped into its domain before evaluation",
    "reject": "reject: {p}_predict returns {P}_ERROR_OUT_OF_DOMAIN and leaves y untouched",
}


def render(bundle, *, precision: str, prefix: str, out_of_domain: str, activation_impl: str,
           table_size: int | None, scales: str | None, footprint: bool, bare_metal: bool,
           instruction_count: bool) -> Artifact:
    """Render ``<prefix>.h`` and ``<prefix>.c`` for ``bundle``; see docs/c-backend.md. The options
    come resolved by the C target's spec (:mod:`nodecast.compiler.targets`: values per precision,
    defaults); ``scales`` ("node" or "layer"): q15/q31 fixed-point scales per hidden node or per
    layer (see :mod:`nodecast.compiler.fixedpoint`)."""
    net = bundle.network
    fixed = _check_model(net, precision, prefix)
    impl = activation_impl
    if fixed:
        from nodecast.compiler.passes.quantise import make_plan
        from nodecast.compiler.typical_error.fixed import estimate as fixed_estimate

        plan = make_plan(net, precision, table_size, scales)
        context = fixed_context(net, plan)
        estimate = fixed_estimate(net, precision, plan=plan)
        certificate = certify(net, "c", precision, plan=plan)
    else:
        context = float_context(net, precision, impl, table_size)
        context["activation_error"] = float_activation_error(impl, precision,
                                                             context.get("table_size"))
        estimate = typical_error.estimate(net, precision, activation_error=context["activation_error"])
        certificate = certify(net, "c", precision, activation_impl=impl,
                              table_size=context.get("table_size"))
    context.update(_common_context(bundle, precision, prefix, out_of_domain, impl, estimate,
                                   context))
    context.update(_bound_context(net, certificate))
    files = {f"{prefix}.h": _render_template("model.h.j2", context),
             f"{prefix}.c": _render_template("model_fixed.c.j2" if fixed else "model_float.c.j2",
                                             context)}
    summary = {"precision": precision, "estimate": estimate.as_dict(), "prefix": prefix,
               "certificate": certificate.as_dict(),
               "activation_impl": impl, "activation_error": context["activation_error"],
               "out_of_domain": out_of_domain, "weight_bytes": context["weight_bytes"],
               "scratch_bytes": context["scratch_bytes"]}
    if fixed:
        summary["scales"] = plan.scales
    if footprint:
        from nodecast.compiler.toolchain import footprint as measure_footprint

        summary["footprint"] = measure_footprint(files, prefix, uses_libm=impl == "libm")
    if instruction_count:
        from nodecast.compiler.instruction_count import instruction_counts

        summary["instructions"] = instruction_counts(files, net, prefix, precision)
    if bare_metal:
        files.update(board_files())
    return Artifact("c", files, False, summary)


def _check_model(net, precision: str, prefix: str) -> bool:
    """Refuse what this model cannot take (one line each); True for fixed point."""
    check_prefix(prefix)
    fixed = precision in FIXED_PRECISIONS
    if fixed and net.n_categorical:
        raise NodecastError(f"{precision} artifacts do not take categorical inputs yet; choose "
                            "float32 or float64")
    _check_label_lengths(net.class_labels)
    return fixed


C99_STRING_LIMIT = 4095  # ISO C99 5.2.4.1: the characters a string literal must be able to hold


def _check_label_lengths(labels) -> None:
    """A class label becomes a string literal; longer than C99 guarantees, -Wpedantic refuses it."""
    for label in labels:
        size = len(label.encode("utf-8"))
        if size > C99_STRING_LIMIT:
            raise NodecastError(f"class label {label[:20]!r}... is {size} bytes; a C99 string "
                                f"literal holds at most {C99_STRING_LIMIT}; shorten the labels")


def _render_template(name: str, context: dict) -> bytes:
    from nodecast.templates import render

    # Every piece of user text was escaped already; ASCII is a last check that nothing slipped by.
    return render("c", name, **context).encode("ascii")


def _common_context(bundle, precision, prefix, policy, impl, estimate, context) -> dict:
    net, upper = bundle.network, prefix.upper()
    fixed = precision in FIXED_PRECISIONS
    size = context.get("table_size") or (context["plan"].table_size if fixed else 0)
    impl_text = _IMPL_TEXT[impl].format(fn=context.get("tanh_function", ""), size=size)
    logistic = net.activation == "logistic"
    return {
        "prefix": prefix, "PREFIX": upper, "guard": f"NODECAST_{upper}_H", "version": __version__,
        "bundle_id": bundle.bundle_id, "precision": precision, "out_of_domain": policy,
        "activation": net.activation, "activation_impl": impl, "activation_impl_text": impl_text,
        "activation_error_literal": double_literal(context["activation_error"]),
        "activation_error_text": f"{context['activation_error']:.3g}"
                                 + (" (halved for a logistic node)" if logistic else ""),
        "activation_text": ("logistic, as 1/2 + tanh(z/2)/2" if logistic else "tanh")
                           + f", tanh from {impl_text}",
        "table_size": size, "fixed": fixed, "classifier": net.task == "classification",
        "n_inputs": net.n_features, "n_outputs": net.n_outputs, "n_nodes": net.n_nodes,
        "io_type": context["word"] if fixed else context["real"],
        "summary_line": f"{net.task} network: {text.count(net.n_features, 'input')} -> "
                        f"{text.count(net.n_outputs, 'output')}, {net.n_nodes} {net.activation} nodes, "
                        f"{precision}.",
        "precision_text": text.precision_text(precision),
        "policy_text": _POLICY_TEXT[policy].format(P=upper, p=prefix),
        "policy_bounds": policy != "pass",
        "bound_type": context["word"] if fixed else context["real"],
        "domain_low": context["input_low"] if fixed else context["domain_low"],
        "domain_high": context["input_high"] if fixed else context["domain_high"],
        "z_range": text.z_range(net), "estimate_lines": text.estimate_lines(net, estimate),
        "input_lines": text.input_lines(net, context), "output_lines": text.output_lines(net, context),
        "format_lines": text.format_lines({**context, "prefix": prefix}) if fixed else [],
        "layout_lines": text.layout_lines(fixed, upper),
        "return_text": text.return_text(fixed, policy, upper),
        "status_codes": text.status_codes(fixed, policy, upper),
        **dict(zip(("scratch_members", "scratch_text"),
                   text.scratch_members({**context, "PREFIX": upper}, fixed), strict=True)),
        "class_names": [c_string(label) for label in net.class_labels],
        **_level_context(net, context),
    }


def stated_activation_error(net, precision: str, impl: str | None, table_size: int | None) -> float:
    """The ACTIVATION_ERROR an artifact with these options states (what verify expects)."""
    if precision in FIXED_PRECISIONS:
        from nodecast.compiler.fixedpoint import table_error

        return table_error(precision, table_size)
    return float_activation_error(impl or TARGETS["c"].option("activation_impl").default_value(
        precision), precision, table_size)


def float_activation_error(impl: str, precision: str, table_size: int | None) -> float:
    """Stated max abs error of the tanh ``impl`` evaluates in C (a logistic node halves it): proven
    for rational and table, assumed for libm (:mod:`nodecast.compiler.bounds.programs`, which reads
    the tables and coefficients of :mod:`~nodecast.compiler.backends.c_float`)."""
    from nodecast.compiler.bounds.programs import c_float_activation

    return c_float_activation(precision, impl, table_size)[1]


def _bound_context(net, certificate) -> dict:
    lines = [f"y[{o}] {c_comment(name)}: {value:.3g} [{c_comment(unit)}]"
             for o, (name, unit, value) in enumerate(zip(net.target_names, net.target_units,
                                                         certificate.per_output, strict=True))]
    return {"bound_lines": lines, "bound_assumes": certificate.assumption,
            "bound_literals": [_with_point(repr(float(v))) for v in certificate.per_output]}


def _level_context(net, context) -> dict:
    """Categorical inputs: per input its level table (levels x tiles x tile, in the hidden
    layer's tiles, the padding nodes copying the last node) and the header's code listing."""
    from nodecast.compiler.backends.c_float import tiled_rows

    tables = []
    for c, (name, levels) in enumerate(zip(net.categorical_names, net.categorical_levels,
                                           strict=True)):
        start = net.level_start(c)
        weights = net.level_weights[start : start + len(levels)]
        tables.append({
            "count": len(levels), "name": c_comment(name),
            "rows": tiled_rows(weights, context["tile"], context["n_tiles"], context["literal"]),
            "codes": [f"{k} = {c_comment(level)}" for k, level in enumerate(levels)],
            "strings": [c_string(level) for level in levels]})
    return {"n_categorical": net.n_categorical, "level_tables": tables}



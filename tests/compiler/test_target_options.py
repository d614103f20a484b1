"""One option spec per target (compiler/targets.py) drives the command line's choices and the Python
API's validation; an unknown or misspelt option raises instead of being dropped."""

from __future__ import annotations

import click
import pytest

from nodecast.cli.emit import emit as emit_command
from nodecast.cli.inspect import inspect as inspect_command
from nodecast.cli.select import select as select_command
from nodecast.compiler import emit
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.targets import PRECISIONS, TARGETS, all_choices


def cli_choices(command: click.Command, name: str):
    param = next(p for p in command.params if p.name == name)
    if isinstance(param.type, click.Choice):
        return tuple(param.type.choices)
    if isinstance(param.type, click.IntRange):
        return (param.type.min, param.type.max)
    return None


def test_emit_choices_come_from_the_specs():
    assert cli_choices(emit_command, "target") == tuple(TARGETS)
    assert set(cli_choices(emit_command, "precision")) == {p for s in TARGETS.values()
                                                            for p in s.precisions}
    assert cli_choices(emit_command, "out_of_domain") == all_choices("out_of_domain")
    assert cli_choices(emit_command, "activation_impl") == TARGETS["c"].option("activation_impl").choices
    assert cli_choices(emit_command, "table_size") == TARGETS["c"].option("table_size").value_range


def test_every_spec_option_is_an_emit_option():
    cli_names = {p.name for p in emit_command.params}
    for spec in TARGETS.values():
        api_only = {o.name for o in spec.options if o.api_only}  # the command line sets these
        assert set(spec.names) - api_only <= cli_names, spec.name
        assert not api_only & cli_names, spec.name


@pytest.mark.parametrize("command", [inspect_command, select_command])
def test_precision_choices_everywhere_are_the_specs(command):
    assert set(cli_choices(command, "precision")) == set(PRECISIONS)


def test_a_misspelt_option_raises_instead_of_being_dropped(demo_bundle):
    with pytest.raises(NodecastError, match="no option 'precison'.*did you mean 'precision'"):
        emit(demo_bundle, "onnx", precison="float64")


@pytest.mark.parametrize("target,options,message", [
    ("python", {"precision": "float32"}, "python takes precision float64"),
    ("onnx", {"precision": "q15"}, "onnx takes precision"),
    ("c", {"table_size": 8}, "integer 16..65536"),
    ("c", {"activation_impl": "cordic"}, "--activation-impl libm, rational, table"),
    ("python", {"flag_out_of_domain": True}, "adds an output to an ONNX graph"),
])
def test_values_outside_the_spec_are_refused(demo_bundle, target, options, message):
    with pytest.raises(NodecastError, match=message):
        emit(demo_bundle, target, **options)


def test_fixed_point_defaults_to_clamp(demo_bundle):
    """`emit --to c --precision q15` works as typed: fixed point cannot pass inputs outside the
    domain, so its default policy is clamp (the float default stays pass)."""
    artifact = emit(demo_bundle, "c", precision="q15")
    assert artifact.summary["out_of_domain"] == "clamp"
    assert emit(demo_bundle, "c").summary["out_of_domain"] == "pass"


@pytest.mark.parametrize("options,message", [
    ({"precision": ""}, "not ''"),  # a falsy precision is refused, not read as the default
    ({"precision": "q15", "out_of_domain": "pass"}, "clamp, reject at q15"),
    ({"precision": "q31", "activation_impl": "rational"}, "table at q31"),
    ({"table_size": 64}, "--table-size applies to --activation-impl table only"),
    ({"activation_impl": "table", "table_size": 64.0}, "an integer 16..65536"),
    ({"bare_metal": 1}, "True or False"),
])
def test_the_spec_refuses_what_the_precision_or_another_option_rules_out(options, message):
    with pytest.raises(NodecastError, match=message):
        TARGETS["c"].resolve(options)


def test_defaults_follow_the_precision_and_numpy_integers_are_integers():
    import numpy as np

    c = TARGETS["c"]
    assert c.resolve({"precision": "q31"})["table_size"] == 2048
    assert c.resolve({"precision": "q15"})["activation_impl"] == "table"
    assert c.resolve({})["table_size"] is None  # no table, no size
    size = c.resolve({"activation_impl": "table", "table_size": np.int64(64)})["table_size"]
    assert size == 64 and type(size) is int


def test_onnx_opsets_in_the_spec_are_those_the_back_end_writes():
    from nodecast.compiler.backends import onnx as onnx_backend

    low, high = TARGETS["onnx"].option("opset").value_range
    assert onnx_backend.SUPPORTED_OPSETS == tuple(range(low, high + 1))


def test_emit_q15_as_typed_on_the_command_line(demo_bundle, tmp_path, capsys):
    from nodecast.compiler import save
    from tests.helpers import run_cli

    model = save(demo_bundle, tmp_path / "Fan-V2.ncast")
    result = run_cli(capsys, "emit", model, "--to", "c", "--precision", "q15",
                     "--no-instruction-count", "-o", tmp_path / "fw")
    assert result.status == 0, result.err
    header = (tmp_path / "fw" / "fan_v2.h").read_text()  # the prefix from the bundle's name
    assert '#define FAN_V2_OUT_OF_DOMAIN "clamp"' in header

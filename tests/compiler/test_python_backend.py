"""The Python back-end's file: options, determinism, exact literals, provenance, lint and the
escaping of hostile names (the file is parsed, never trusted to behave)."""

from __future__ import annotations

import ast
import math
import py_compile
import shutil
import subprocess
import sys
from fractions import Fraction
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nodecast.compiler import NodecastError, emit
from nodecast.compiler.backends import python as backend
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.ir import Network
from nodecast.compiler.verify.runners import python as runner
from nodecast.compiler.version import __version__

REPO = Path(__file__).resolve().parents[2]
HOSTILE = [  # the first would close a pasted docstring and run code (it does, unescaped)
    '"""; import pathlib; pathlib.Path("MARKER").write_text("x"); print("PWNED"); """',
    '"""\nimport pathlib; pathlib.Path("MARKER").write_text("x"); print("PWNED")\n"""',
    "'''; print('PWNED'); '''",
    "back\\slash\\", "\\\"\"\"", "{{ 7 * 7 }}", "{% if true %}PWNED{% endif %}", "*/ #",
    "line\nbreak\r\n# -*- coding: latin-1 -*-", "\u2028sep\u202eoverride\x0cform",
    "température 😀", "x" * 150 + " with spaces " + "\\" * 41 + '"' * 7,
]


def _source(bundle, **options) -> str:
    return emit(bundle, "python", **options).files["predictor.py"].decode("utf-8")


def _constants(text: str) -> dict:
    values = {}
    for node in ast.parse(text).body:
        if isinstance(node, ast.Assign) and isinstance(node.targets[0], ast.Name):
            try:
                values[node.targets[0].id] = ast.literal_eval(node.value)
            except ValueError:
                continue
    return values


def hostile_bundle(activation="logistic", task="classification") -> Bundle:
    """A small random network whose every name, unit and label is hostile text."""
    rng = np.random.default_rng(7)
    n, m, t = 3, 6, 3 if task == "classification" else 2
    names = HOSTILE + [f"extra {i}" for i in range(20)]
    return Bundle(Network(
        hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
        activation=activation, output_weights=rng.normal(size=(m, t)),
        output_bias=rng.normal(size=t), input_offset=np.zeros(n), input_scale=np.ones(n),
        output_offset=np.zeros(t), output_scale=np.ones(t), domain_low=np.zeros(n),
        domain_high=np.ones(n), feature_names=names[:n], feature_units=names[n:2 * n],
        target_names=names[2 * n:2 * n + t], target_units=names[2 * n + t:2 * n + 2 * t],
        task=task, class_labels=names[-t:] if task == "classification" else ()))


def test_render_is_one_python_file_with_a_float64_estimate(friedman_bundle):
    artifact = emit(friedman_bundle, "python")
    assert artifact.kind == "python" and artifact.single_file
    assert list(artifact.files) == ["predictor.py"]
    assert artifact.summary["precision"] == "float64"
    assert artifact.summary["estimate"]["precision"] == "float64"
    assert 0 < artifact.summary["estimate"]["max_abs_error"] < 1e-9


@pytest.mark.parametrize("precision", ["float32", "q31", "q15", "float16"])
def test_only_float64_is_accepted(friedman_bundle, precision):
    with pytest.raises(NodecastError, match="float64 only"):
        emit(friedman_bundle, "python", precision=precision)


def test_unknown_policy_is_refused(friedman_bundle):
    with pytest.raises(NodecastError, match="--out-of-domain clamp, pass, reject"):
        emit(friedman_bundle, "python", out_of_domain="ignore")


def test_cli_refuses_float32_with_one_line_and_exit_2(friedman_bundle, tmp_path):
    from nodecast.compiler import save

    save(friedman_bundle, tmp_path / "m.ncast")
    command = ["emit", str(tmp_path / "m.ncast"), "--to", "python", "--precision", "float32",
               "-o", str(tmp_path / "p.py")]
    done = subprocess.run([sys.executable, "-m", "nodecast.cli", *command],
                          capture_output=True, text=True)
    assert done.returncode == 2 and "Traceback" not in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1 and "float64" in done.stderr
    assert not (tmp_path / "p.py").exists()


@pytest.mark.parametrize("policy", ["clamp", "pass", "reject"])
def test_same_bundle_gives_byte_identical_files(friedman_bundle, policy):
    first = emit(friedman_bundle, "python", out_of_domain=policy).files["predictor.py"]
    assert first == emit(friedman_bundle, "python", out_of_domain=policy).files["predictor.py"]
    assert _constants(first.decode())["OUT_OF_DOMAIN"] == policy


def test_weights_round_trip_float64_exactly(friedman_bundle):
    # repr gives the shortest string that reads back as the same IEEE 754 binary64 (Python docs)
    net = friedman_bundle.network
    values = _constants(_source(friedman_bundle))
    hidden = np.array(values["_HIDDEN"])
    assert np.array_equal(hidden[:, :-1] * 2.0, net.hidden_weights)
    assert np.array_equal(hidden[:, -1] * 2.0, net.hidden_biases)
    assert np.array_equal(np.array(values["_OUTPUT_WEIGHTS"]).T * 2.0, net.output_weights)
    for name in ("domain_low", "domain_high", "input_offset", "input_scale", "output_scale"):
        assert np.array_equal(values[name.upper()] if name.startswith("domain") else
                              values["_" + name.upper()], getattr(net, name))


def test_folded_logistic_bias_is_the_correctly_rounded_sum(friedman_bundle):
    # math.fsum rounds the exact sum once (Python docs, Shewchuk's algorithm); check with Fractions
    net = friedman_bundle.network
    bias = _constants(_source(friedman_bundle))["_OUTPUT_BIAS"][0]
    exact = Fraction(net.output_bias[0]) + sum(Fraction(b) / 2 for b in net.output_weights[:, 0])
    assert bias == float(exact)


def test_tanh_networks_keep_their_weights_unscaled():
    bundle = hostile_bundle(activation="tanh", task="regression")
    values = _constants(_source(bundle))
    assert np.array_equal(np.array(values["_HIDDEN"])[:, :-1], bundle.network.hidden_weights)
    assert np.array_equal(values["_OUTPUT_BIAS"], bundle.network.output_bias)


def test_provenance_docstring_says_what_the_spec_asks(friedman_bundle):
    text = _source(friedman_bundle, out_of_domain="clamp")
    doc = ast.get_docstring(ast.parse(text))
    net = friedman_bundle.network
    estimate = emit(friedman_bundle, "python").summary["estimate"]["per_output"][0]
    for needed in (f"nodecast {__version__}", friedman_bundle.bundle_id, "policy 'clamp'",
                   "not a safety function", "guard", "functional-safety standards",
                   "yours to license", f"{estimate:.3g}", "'x0', unit '1'",
                   f"{float(net.domain_low[0])!r} .. {float(net.domain_high[0])!r}"):
        assert needed in doc, needed
    order = [doc.index(f"'x{i}', unit") for i in range(5)]
    assert order == sorted(order)


def test_template_ships_as_package_data():
    path = resources.files("nodecast.templates") / "python" / backend.TEMPLATE
    assert path.is_file() and "{{ hidden }}" in path.read_text("utf-8")


@pytest.mark.parametrize("task", ["classification", "regression"])
@pytest.mark.parametrize("activation", ["logistic", "tanh"])
def test_hostile_names_are_inert_data(task, activation, tmp_path):
    bundle = hostile_bundle(activation, task)
    text = _source(bundle, out_of_domain="reject")
    values, net = _constants(text), bundle.network
    for name in ("feature_names", "feature_units", "target_names", "target_units", "class_labels"):
        assert values[name.upper()] == getattr(net, name)
    tree = ast.parse(text, feature_version=(3, 8))
    called = {node.func.attr if isinstance(node.func, ast.Attribute) else node.func.id
              for node in ast.walk(tree) if isinstance(node, ast.Call)
              and isinstance(node.func, (ast.Attribute, ast.Name))}
    assert not called & {"write_text", "system", "print", "exec", "eval"}
    path = tmp_path / "predictor.py"
    path.write_text(text, encoding="utf-8")
    data = runner.rows_as_csv(net.feature_names, np.full((2, net.n_features), 0.5))
    for arguments, stdin in ((["--help"], b""), (["--scores"], data)):
        done = subprocess.run([sys.executable, "-I", "-S", str(path), *arguments], cwd=tmp_path,
                              input=stdin, capture_output=True)
        assert done.returncode == 0, done.stderr
        assert b"PWNED" not in done.stdout.split(b"\n") and b"PWNED" not in done.stderr
    assert not (tmp_path / "MARKER").exists()


@pytest.mark.parametrize("bundle_name", ["friedman_bundle", "classifier_bundle", "hostile"])
@pytest.mark.parametrize("policy", ["clamp", "pass", "reject"])
def test_file_compiles_parses_as_python_3_8_and_passes_ruff(bundle_name, policy, request, tmp_path):
    bundle = hostile_bundle() if bundle_name == "hostile" else request.getfixturevalue(bundle_name)
    path = tmp_path / "predictor.py"
    path.write_bytes(emit(bundle, "python", out_of_domain=policy).files["predictor.py"])
    ast.parse(path.read_text("utf-8"), feature_version=(3, 8))
    py_compile.compile(str(path), cfile=str(tmp_path / "p.pyc"), doraise=True)
    if shutil.which("ruff") is None:
        pytest.skip("ruff is not installed")
    done = subprocess.run(["ruff", "check", "--no-cache", "--config", str(REPO / "pyproject.toml"),
                           str(path)], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout


def test_generated_imports_are_standard_library_only(classifier_bundle):
    tree = ast.parse(_source(classifier_bundle))
    imported = {alias.name.split(".")[0] for node in ast.walk(tree) if isinstance(node, ast.Import)
                for alias in node.names}
    imported |= {node.module.split(".")[0] for node in ast.walk(tree)
                 if isinstance(node, ast.ImportFrom)}
    assert imported and imported <= set(sys.stdlib_module_names)  # Python docs: sys module


def test_describe_reads_constants_without_running_the_file(friedman_bundle, tmp_path):
    path = tmp_path / "predictor.py"
    text = _source(friedman_bundle, out_of_domain="reject")
    path.write_text(text.replace("\nimport csv\n", "\nraise SystemExit('executed')\nimport csv\n"))
    info = runner.describe(path)
    assert (info["kind"], info["bundle_id"]) == ("python", friedman_bundle.bundle_id)
    assert (info["precision"], info["out_of_domain"]) == ("float64", "reject")
    assert info["engines"] == [f"python{sys.version_info[0]}.{sys.version_info[1]}"]


def test_describe_refuses_files_not_made_by_nodecast(tmp_path):
    (tmp_path / "other.py").write_text("BUNDLE_ID = 'abc'\n")
    with pytest.raises(NodecastError, match="not made by nodecast"):
        runner.describe(tmp_path / "other.py")
    (tmp_path / "broken.py").write_text("def (:\n")
    with pytest.raises(NodecastError, match="not a readable Python file"):
        runner.describe(tmp_path / "broken.py")


@settings(max_examples=300, deadline=None)
@given(st.text(alphabet=st.sampled_from(list(' \\"\'abc\n{}%#') + ["\u2028", "é"]), max_size=400),
       st.sampled_from(["", "    ", "        "]))
def test_docstring_lines_never_change_meaning_and_stay_within_the_limit(text, rest):
    shown = repr(text)  # the back-end shows user text by repr, then escapes it for the docstring
    lines = backend.docstring_lines(shown, "    ", rest)
    assert all(len(line) <= backend.LINE_LIMIT and line == line.rstrip() for line in lines)
    parsed = ast.literal_eval('"""' + "\n".join(lines) + '\n"""')
    assert "".join(parsed.split()) == "".join(shown.split())


def test_long_names_are_marked_for_the_line_limit_not_cut():
    literal = backend.text_tuple(["n" * 200, "short"])
    assert ast.literal_eval(literal) == ("n" * 200, "short")
    assert literal.count("# noqa: E501") == 1


def test_float_literals_are_exact_for_awkward_values():
    values = [0.1, -0.0, 5e-324, 1.7976931348623157e308, 2.0**-1074 * 3, math.pi, 1 / 3]
    assert ast.literal_eval(backend.float_tuple(values)) == tuple(values)
    lines = backend.float_tuple(values * 20).split("\n")
    assert all(len(line) <= backend.LINE_LIMIT for line in lines)

"""Hostile names never change the meaning of generated code, in every back-end.

Feature, target and class names and units carry payloads that would close a comment or a string and
declare a symbol, run code in the Python predictor, or be read as template syntax. For each target
the tests show the artifact builds and runs, computes what the reference computes, keeps the text
exactly (where the target stores it), and has the same code skeleton as the artifact of an
identical network with plain names: only the contents of comments and string literals differ.
"""

from __future__ import annotations

import ast
import csv
import importlib.util
import io
import json
import re
import shutil
import subprocess
import sys

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nodecast.compiler import emit, reference
from nodecast.compiler.backends import BACKENDS
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from tests.helpers import run_cli, write_csv

PAYLOADS = [
    'double "quote', "single 'quote", "back\\slash", "trailing backslash\\",
    "*/ int planted_c_comment = 1; /*", "// planted_line\nint planted_newline = 2;",
    '"; int planted_c_string = 3; static const char *z = "',
    "'''+str(__import__('os').system('touch planted_py_single'))+'''",
    '"""\nimport os; os.system("touch planted_py_double")\n"""',
    "{{ planted_jinja }}", "{% raw %}planted_jinja_block{% endraw %}", "%s%d%n%x planted_format",
    "non-ASCII: temp\u00e9rature \u00b5\u00b0 \u6e29\u5ea6 \U0001f600", "long " + "x" * 3000,
    "??/ trigraph ??= ??(", "control \r\n\t\x1b[31m \x7f inside", "line \u2028 separators \u2029 x",
    "#define planted_macro 1", "\\\n#include <planted.h>", "${planted} $(planted) `planted`",
]
UNIT = '*/ "units" \\ \n'
LABELS = ('"; int planted_label = 1; //', "label\nwith newline */", "\U0001f600 \\ '''")


def _network(names, targets, labels=(), seed=3) -> Network:
    rng = np.random.default_rng(seed)
    n, m, t = len(names), 8, len(labels) or len(targets)
    return Network(
        hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
        activation="logistic", output_weights=rng.normal(size=(m, t)), output_bias=np.zeros(t),
        input_offset=np.zeros(n), input_scale=np.ones(n), output_offset=np.zeros(t),
        output_scale=np.ones(t), domain_low=np.zeros(n), domain_high=np.ones(n),
        feature_names=tuple(names), target_names=tuple(targets),
        feature_units=(UNIT,) * n, target_units=(UNIT,) * t,
        task="classification" if labels else "regression", class_labels=tuple(labels))


def _pair(classifier: bool) -> tuple[Bundle, Bundle]:
    """(hostile, plain): the same network, with hostile or with plain names and units."""
    labels = LABELS if classifier else ()
    targets = LABELS if classifier else ("y */ planted", 'y2 "\n')
    hostile = _network(PAYLOADS, targets, labels)
    plain = hostile.replace(feature_names=tuple(f"f{i}" for i in range(len(PAYLOADS))),
                            target_names=tuple(f"t{i}" for i in range(len(targets))),
                            class_labels=tuple(f"c{i}" for i in range(len(labels))),
                            feature_units=("u",) * len(PAYLOADS),
                            target_units=("u",) * len(targets))
    return Bundle(hostile, {}), Bundle(plain, {})


@pytest.fixture(scope="module", params=[False, True], ids=["regression", "classifier"])
def pair(request):
    return _pair(request.param)


def _available(kind: str) -> bool:
    return importlib.util.find_spec(BACKENDS[kind]) is not None


def test_every_registered_back_end_is_covered_here():
    # the three targets of the spec; a new back-end must be added to the tests of this file
    assert set(BACKENDS) == {"onnx", "c", "python"}
    assert all(_available(kind) for kind in BACKENDS)


def _probe(net, rows=64, seed=0):
    return np.random.default_rng(seed).random((rows, net.n_features))


# -- ONNX ------------------------------------------------------------------------------------------

def _onnx_skeleton(model):
    graph = model.graph
    return ([(n.op_type, list(n.input), list(n.output)) for n in graph.node],
            [i.name for i in graph.input], [o.name for o in graph.output],
            [t.name for t in graph.initializer], sorted(p.key for p in model.metadata_props))


def test_onnx_keeps_names_as_data_and_its_graph_unchanged(pair):
    import onnx
    import onnxruntime as ort

    hostile, plain = pair
    models = [onnx.load_from_string(emit(b, "onnx", precision="float64").files["model.onnx"])
              for b in (hostile, plain)]
    onnx.checker.check_model(models[0], full_check=True)
    assert _onnx_skeleton(models[0]) == _onnx_skeleton(models[1])
    net = hostile.network
    props = {p.key: p.value for p in models[0].metadata_props}
    assert json.loads(props["nodecast.feature_names"]) == list(net.feature_names)
    assert json.loads(props["nodecast.target_units"]) == list(net.target_units)
    assert json.loads(props["nodecast.class_labels"]) == list(net.class_labels)
    session = ort.InferenceSession(models[0].SerializeToString(),
                                   providers=["CPUExecutionProvider"])
    X = _probe(net)
    outputs = session.run(None, {"features": X})
    assert np.max(np.abs(outputs[0] - reference.predict(net, X))) < 1e-12
    if net.task == "classification":  # the label output hands back the exact label text
        assert list(outputs[1]) == list(reference.predict_labels(net, X))


# -- Python ----------------------------------------------------------------------------------------

class _Blank(ast.NodeTransformer):
    def visit_Constant(self, node):
        return ast.Constant(value="" if isinstance(node.value, str) else node.value)


def _python_skeleton(source: bytes) -> str:
    return ast.dump(_Blank().visit(ast.parse(source)))


def _run_predictor(path, args, cwd):
    return subprocess.run([sys.executable, "-I", "-S", str(path), *args], cwd=cwd,
                          capture_output=True, text=True, timeout=120)


def test_python_predictor_holds_names_as_data_and_runs_no_payload(pair, tmp_path):
    hostile, plain = pair
    sources = [emit(b, "python").files["predictor.py"] for b in (hostile, plain)]
    assert _python_skeleton(sources[0]) == _python_skeleton(sources[1])
    path = tmp_path / "predictor.py"
    path.write_bytes(sources[0])
    net = hostile.network
    X = _probe(net, rows=5)
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows([net.feature_names, *X.tolist()])
    (tmp_path / "rows.csv").write_text(buffer.getvalue(), encoding="utf-8")
    check = ("import json, predictor; print(json.dumps([predictor.FEATURE_NAMES, "
             "predictor.TARGET_NAMES, predictor.CLASS_LABELS, predictor.FEATURE_UNITS]))")
    imported = subprocess.run([sys.executable, "-I", "-S", "-c", check], cwd=tmp_path,
                              capture_output=True, text=True, timeout=120, env={"PYTHONPATH": ""})
    if imported.returncode != 0:  # -I ignores PYTHONPATH; the script folder is not on sys.path
        imported = subprocess.run([sys.executable, "-S", "-c", check], cwd=tmp_path,
                                  capture_output=True, text=True, timeout=120)
    assert imported.returncode == 0, imported.stderr
    names = json.loads(imported.stdout)
    assert names == [list(net.feature_names), list(net.target_names), list(net.class_labels),
                     list(net.feature_units)]
    result = _run_predictor(path, ["rows.csv"], tmp_path)
    assert result.returncode == 0, result.stderr
    rows = list(csv.reader(io.StringIO(result.stdout, newline="")))
    assert len(rows) == 1 + len(X)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["predictor.py", "rows.csv"]


# -- C ---------------------------------------------------------------------------------------------

_STRING = re.compile(r'"(?:[^"\\\n]|\\.)*"')


def _c_skeleton(gcc: str, path) -> list[str]:
    """Tokens of a C file, comments removed (by the compiler) and string contents blanked."""
    stripped = subprocess.run([gcc, "-fpreprocessed", "-dD", "-E", "-P", "-x", "c", str(path)],
                              capture_output=True, text=True, timeout=60, check=True).stdout
    return _STRING.sub('""', stripped).split()


def _emit_c(bundle, folder, precision="float64"):
    folder.mkdir()
    emit(bundle, "c", folder, precision=precision, prefix="fan")
    return folder


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
@pytest.mark.parametrize("classifier, precision", [(False, "float64"), (True, "float64"),
                                                   (True, "q15")])
def test_c_sources_keep_names_in_comments_and_strings_only(classifier, precision, tmp_path):
    hostile, plain = _pair(classifier)
    options = {"out_of_domain": "clamp"} if precision == "q15" else {}
    folders = []
    for name, bundle in (("hostile", hostile), ("plain", plain)):
        folder = tmp_path / name
        folder.mkdir()
        emit(bundle, "c", folder, precision=precision, prefix="fan", **options)
        folders.append(folder)
    for file in ("fan.h", "fan.c"):
        text = (folders[0] / file).read_bytes()
        assert text.isascii()
        assert _c_skeleton("gcc", folders[0] / file) == _c_skeleton("gcc", folders[1] / file)
    flags = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wshadow",
             "-Wdouble-promotion", "-Werror", "-c"]
    subprocess.run(["gcc", *flags, "fan.c", "-o", "fan.o"], cwd=folders[0], check=True,
                   timeout=120)
    symbols = subprocess.run(["nm", "-g", "--defined-only", "fan.o"], cwd=folders[0], check=True,
                             capture_output=True, text=True).stdout.split()[2::3]
    assert not [s for s in symbols if "planted" in s]
    assert set(symbols) <= {"fan_predict", "fan_label", "fan_class_names"}


LABEL_PRINTER = r"""
#include <stdio.h>
#include "fan.h"
int main(void) {
    int i;
    const unsigned char *p;
    for (i = 0; i < FAN_N_OUTPUTS; ++i) {
        for (p = (const unsigned char *)fan_class_names[i]; *p; ++p) printf("%02x", *p);
        printf("\n");
    }
    return 0;
}
"""


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
def test_c_class_name_table_holds_the_exact_label_bytes(tmp_path):
    hostile, _ = _pair(classifier=True)
    folder = _emit_c(hostile, tmp_path / "c")
    (folder / "main.c").write_text(LABEL_PRINTER)
    subprocess.run(["gcc", "-std=c99", "-Wall", "-Werror", "main.c", "fan.c", "-lm", "-o",
                    "labels"], cwd=folder, check=True, timeout=120)
    printed = subprocess.run(["./labels"], cwd=folder, capture_output=True, text=True,
                             check=True).stdout.split()
    assert [bytes.fromhex(line).decode("utf-8") for line in printed] == list(LABELS)


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
def test_c_artifact_with_hostile_names_verifies_against_the_reference(tmp_path):
    from nodecast.compiler.verify import verify

    hostile, _ = _pair(classifier=False)
    folder = _emit_c(hostile, tmp_path / "c")
    result = verify(hostile, folder, None, 256, 0)
    assert result.passed, result.as_dict()


@pytest.mark.parametrize("name", ["", " padded", "padded ", "\tx", "x\n", "\u2028x"])
def test_feature_names_csv_headers_could_never_match_are_refused(name):
    with pytest.raises(NodecastError, match="empty or starts or ends with white space"):
        _network(["ok", name], ["y"])


def test_nul_characters_are_refused_in_every_name():
    # a C string ends at NUL, so the C label table would silently shorten such a label
    with pytest.raises(NodecastError, match=r"class_labels entry 'a\\x00b' holds a NUL"):
        _network(["x"], ["a", "c"], labels=("a\x00b", "c"))
    with pytest.raises(NodecastError, match="feature_names entry .* holds a NUL"):
        _network(["nul \x00 inside"], ["y"])


@pytest.mark.parametrize("prefix", ["model; int x", "../model", "Model", "1model", "int", "stdio",
                                    "", "m" * 40, "mod\u00e8le", "model\n", "model.h"])
def test_c_prefix_is_the_only_identifier_and_is_validated(prefix):
    hostile, _ = _pair(classifier=False)
    with pytest.raises(NodecastError, match="--prefix"):
        emit(hostile, "c", precision="float64", prefix=prefix)


# -- the whole path: CSV header -> train -> every target -> verify ---------------------------------

@pytest.mark.slow
def test_hostile_csv_header_and_labels_survive_train_emit_verify(tmp_path):
    rng = np.random.default_rng(1)
    names = [PAYLOADS[i] for i in (0, 4, 7, 8, 12)]
    X = rng.random((150, len(names)))
    labels = np.array(LABELS, dtype=object)[(X[:, 0] * 2.999).astype(int)]
    buffer = io.StringIO()
    csv.writer(buffer, lineterminator="\n").writerows(
        [[*names, "kind */"]] + [[*map(repr, map(float, row)), label] for row, label in
                                 zip(X, labels, strict=True)])
    (tmp_path / "d.csv").write_text(buffer.getvalue(), encoding="utf-8")

    def nodecast(*args):
        return subprocess.run([sys.executable, "-m", "nodecast.cli", *map(str, args)],
                              cwd=tmp_path, capture_output=True, text=True, timeout=300)

    trained = nodecast("train", "d.csv", "--target", "kind */", "--task", "classification",
                       "--nodes", "20", "-o", "m.ncast")
    assert trained.returncode == 0, trained.stderr
    targets = {"onnx": "m.onnx", "python": "m.py"}
    if shutil.which("gcc"):
        targets["c"] = "c_out"
    for kind, output in targets.items():
        emitted = nodecast("emit", "m.ncast", "--to", kind, "-o", output,
                           *(["--precision", "float64"] if kind != "python" else []))
        assert emitted.returncode == 0, (kind, emitted.stderr)
        verified = nodecast("verify", "m.ncast", output, "--data", "d.csv", "--probes", "256")
        assert verified.returncode == 0, (kind, verified.stdout, verified.stderr)
    assert not list(tmp_path.glob("planted*"))


# -- any text at all (hypothesis) ------------------------------------------------------------------

names_text = st.text(st.characters(exclude_categories=("Cs",), exclude_characters="\x00"),
                     min_size=1, max_size=40).filter(lambda s: s.strip() == s != "")
_C_ESCAPES = {"n": b"\n", "t": b"\t", "r": b"\r", '"': b'"', "\\": b"\\", "?": b"?", "'": b"'"}


def _decode_c_string(literal: str) -> bytes:
    """The bytes of a C string literal, by ISO C99 6.4.4.4 (simple and octal escapes only)."""
    assert literal[0] == literal[-1] == '"'
    body, out, i = literal[1:-1], bytearray(), 0
    while i < len(body):
        if body[i] != "\\":
            assert body[i] != '"'
            out += body[i].encode("ascii")
            i += 1
        elif body[i + 1] in "01234567":
            digits = re.match(r"[0-7]{1,3}", body[i + 1:]).group()
            out.append(int(digits, 8))
            i += 1 + len(digits)
        else:
            out += _C_ESCAPES[body[i + 1]]
            i += 2
    return bytes(out)


@settings(max_examples=500, deadline=None, derandomize=True, database=None)
@given(st.text(st.characters(exclude_categories=("Cs",)), max_size=60))
def test_c_escapes_keep_any_text_inert(text):
    from nodecast.compiler.backends.c_format import c_comment, c_string

    comment = c_comment(text)
    assert comment.isascii() and "*/" not in comment and "/*" not in comment
    assert "\n" not in comment and "\r" not in comment and "??" not in comment
    literal = c_string(text)
    assert literal.isascii() and "??" not in literal and "\n" not in literal
    assert _decode_c_string(literal) == text.encode("utf-8")


@settings(max_examples=30, deadline=None, derandomize=True, database=None)
@given(st.lists(names_text, min_size=2, max_size=2, unique=True), names_text)
@pytest.mark.slow
def test_any_names_leave_the_python_and_onnx_skeletons_unchanged(features, unit):
    import onnx

    hostile = Bundle(_network(features, ["y"]).replace(feature_units=(unit, unit)), {})
    plain = Bundle(hostile.network.replace(feature_names=("a", "b"), feature_units=("u", "u")), {})
    python = [emit(b, "python").files["predictor.py"] for b in (hostile, plain)]
    assert _python_skeleton(python[0]) == _python_skeleton(python[1])
    namespace = {}
    exec(compile(python[0], "predictor.py", "exec"), namespace)
    assert namespace["FEATURE_NAMES"] == tuple(features)
    assert namespace["FEATURE_UNITS"] == (unit, unit)
    models = [onnx.load_from_string(emit(b, "onnx").files["model.onnx"]) for b in (hostile, plain)]
    assert _onnx_skeleton(models[0]) == _onnx_skeleton(models[1])


@pytest.mark.slow
def test_percent_in_a_feature_name_keeps_predictor_help_working(tmp_path, capsys):
    rows = np.random.default_rng(1).random((40, 3))
    write_csv(tmp_path / "d.csv", ["a", "%(prog)s %d", "y"], rows)
    for args in (["train", tmp_path / "d.csv", "--target", "y", "--nodes", "6", "-o", tmp_path / "m.ncast"],
                 ["emit", tmp_path / "m.ncast", "--to", "python", "-o", tmp_path / "p.py"]):
        assert run_cli(capsys, *args).status == 0
    result = subprocess.run([sys.executable, "-I", "-S", "p.py", "--help"], cwd=tmp_path,
                            capture_output=True, text=True, timeout=60)
    assert result.returncode == 0 and "%(prog)s %d" in result.stdout

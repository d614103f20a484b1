"""Verify and option refusals through the command line: one line and exit 2 for options that
cannot be honoured, edited artifacts reported or refused, only generated files built, generated
code run in a child process with an empty environment (docs/reliability.md)."""

from __future__ import annotations

import json
import re
import shutil

import numpy as np
import pytest

from nodecast.compiler import emit
from nodecast.compiler.bundle import Bundle, save
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from tests.helpers import run_cli

HAS_GCC = shutil.which("gcc") is not None



def one_line_refusal(code, err) -> bool:
    return code == 2 and err.count("\n") == 1 and err.startswith("nodecast: error: ")


@pytest.fixture()
def work(tmp_path):
    rng = np.random.default_rng(0)
    net = Network(hidden_weights=rng.normal(size=(5, 2)), hidden_biases=rng.normal(size=5),
                  activation="tanh", output_weights=rng.normal(size=(5, 1)), output_bias=[0.2],
                  input_offset=np.zeros(2), input_scale=np.ones(2), output_offset=[0.0],
                  output_scale=[1.0], domain_low=-np.ones(2), domain_high=np.ones(2),
                  feature_names=("load", "speed"), target_names=("temp",))
    save(Bundle(net, {"seed": 0}), tmp_path / "m.ncast")
    rows = rng.random((30, 2))
    lines = ["load,speed,temp"] + [f"{a!r},{b!r},{a - b!r}" for a, b in rows.tolist()]
    (tmp_path / "d.csv").write_text("\n".join(lines) + "\n")
    return tmp_path


@pytest.mark.parametrize("args, message", [
    (["train", "{d}", "--target", "temp", "--domain", "load=0:1,load=0:2"], "names 'load' twice"),
    (["train", "{d}", "--target", "temp", "--units", "lod=A"], "'lod', not a feature or target"),
    (["select", "{d}", "--target", "temp", "--units", "temp=K,tmp=K"], "'tmp', not a feature"),
    (["train", "{d}", "--target", "temp", "--seed", str(2**80)], "--seed"),
    (["select", "{d}", "--target", "temp", "--jobs", "\u00b2"], "--jobs takes a positive"),
    (["verify", "{m}", "{m}", "--seed", "-1"], "--seed"),
    (["emit", "{m}", "--to", "python", "--flag-out-of-domain"], "--flag-out-of-domain adds"),
    (["emit", "{m}", "--to", "c", "--flag-out-of-domain"], "--flag-out-of-domain adds"),
    (["trian", "{d}"], "No such command"),
])
def test_options_that_cannot_be_honoured_are_one_line_refusals(work, capsys, args, message):
    args = [a.format(d=work / "d.csv", m=work / "m.ncast") for a in args]
    if args[0] in ("train", "select", "emit"):
        args += ["-o", str(work / ("out.py" if args[0] == "emit" else "out.ncast"))]
    code, _, err = run_cli(capsys, *args)
    assert one_line_refusal(code, err) and message in err, err
    assert not (work / "out.ncast").exists() and not (work / "out.py").exists()


def _emit(work, capsys, kind, name):
    code, _, err = run_cli(capsys, *["emit", work / "m.ncast", "--to", kind, "-o", work / name])
    assert code == 0, err
    return work / name


def test_generated_files_carry_their_sha256_and_verify_reports_an_edit(work, capsys):
    predictor = _emit(work, capsys, "python", "p.py")
    code, _, _ = run_cli(capsys, *["verify", work / "m.ncast", predictor, "--probes", "32", "--report",
                          work / "r.json"])
    assert code == 0
    assert json.loads((work / "r.json").read_text())["artifact"]["files"] == {"p.py": "unchanged"}
    source = predictor.read_text()
    assert re.search(r"^# nodecast-sha256:[0-9a-f]{64}$", source, re.M)
    predictor.write_text(source.replace("import sys", "import sys  # edited", 1))
    code, out, _ = run_cli(capsys, *["verify", work / "m.ncast", predictor, "--probes", "32", "--report",
                            work / "r2.json"])
    report = json.loads((work / "r2.json").read_text())
    assert report["artifact"]["files"] == {"p.py": "changed"}
    assert "p.py: changed since emit" in out and any("changed since emit" in n
                                                      for n in report["notes"])


def test_onnx_records_its_sha256_in_the_metadata(work, capsys):
    import onnx

    path = _emit(work, capsys, "onnx", "m.onnx")
    props = {p.key: p.value for p in onnx.load(str(path)).metadata_props}
    assert re.fullmatch(r"nodecast-sha256:[0-9a-f]{64}", props["nodecast.sha256"])
    code, _, _ = run_cli(capsys, *["verify", work / "m.ncast", path, "--probes", "16", "--report",
                          work / "r.json"])
    assert code == 0
    assert json.loads((work / "r.json").read_text())["artifact"]["files"] == {"m.onnx": "unchanged"}


def test_the_predictor_runs_with_an_empty_environment(work, capsys, monkeypatch):
    """An edited predictor that dumps its environment sees none of the user's variables."""
    predictor = _emit(work, capsys, "python", "p.py")
    dump = work / "env.json"
    source = predictor.read_text()
    predictor.write_text(source.replace(
        "import sys", f"import sys, os, json; json.dump(dict(os.environ), open({str(dump)!r}, 'w'))",
        1))
    monkeypatch.setenv("NODECAST_TEST_SECRET", "hunter2")
    run_cli(capsys, *["verify", work / "m.ncast", predictor, "--probes", "16"])
    seen = json.loads(dump.read_text())
    assert "NODECAST_TEST_SECRET" not in seen and set(seen) <= {"PATH", "LC_ALL", "LC_CTYPE"}


@pytest.mark.skipif(not HAS_GCC, reason="needs gcc")
@pytest.mark.slow
def test_c_verify_builds_only_the_generated_files_and_refuses_edited_sizes(work, capsys):
    folder = work / "fw"
    _emit(work, capsys, "c", "fw")
    (folder / "main.c").write_text("int main(void) { return 0; }\n")  # the user's own firmware
    code, out, err = run_cli(capsys, *["verify", work / "m.ncast", folder, "--probes", "32"])
    assert code == 0, out + err
    header = (folder / "m.h").read_text()
    for macro in ("M_N_INPUTS", "M_N_OUTPUTS"):  # the prefix is the bundle's name, m
        (folder / "m.h").write_text(re.sub(rf"#define {macro} \d+", f"#define {macro} 99999",
                                               header))
        code, _, err = run_cli(capsys, *["verify", work / "m.ncast", folder, "--probes", "32"])
        assert one_line_refusal(code, err) and "the artifact was edited" in err


def test_python_predictor_with_edited_declarations_is_one_line(work, capsys):
    predictor = _emit(work, capsys, "python", "p.py")
    source = predictor.read_text()
    for edit in (("FEATURE_NAMES = (", "FEATURE_NAMES = ('x',) + ("),
                 ("N_OUTPUTS = ", "N_OUTPUTS = 7 #")):
        predictor.write_text(source.replace(*edit, 1))
        code, _, err = run_cli(capsys, *["verify", work / "m.ncast", predictor, "--probes", "16"])
        assert one_line_refusal(code, err), err
    predictor.write_bytes(source.encode().replace(b"FEATURE_NAMES", b"\xff", 1))
    code, _, err = run_cli(capsys, *["verify", work / "m.ncast", predictor, "--probes", "16"])
    assert one_line_refusal(code, err), err


def test_predictor_reads_a_header_of_40000_extra_columns(work, capsys):
    """The duplicate-header check is one pass (it was quadratic: 77 s for 40,000 columns); see
    tests/benchmarks/predictor_wide_header.py for the time."""
    import subprocess
    import sys

    predictor = _emit(work, capsys, "python", "p.py")
    extra = [f"c{i}" for i in range(40_000)]
    header = ",".join(["load", "speed"] + extra)
    row = ",".join(["0.25", "0.5"] + ["0"] * len(extra))
    done = subprocess.run([sys.executable, "-I", "-S", str(predictor)], input=f"{header}\n{row}\n",
                          capture_output=True, text=True, timeout=600, check=False)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines()[0] == "temp"
    doubled = f"{header},c17\n{row},0\n"
    done = subprocess.run([sys.executable, "-I", "-S", str(predictor)], input=doubled,
                          capture_output=True, text=True, timeout=600, check=False)
    assert done.returncode == 2 and "duplicated column name(s) 'c17'" in done.stderr


def test_emulate_is_refused_for_artifacts_that_are_not_c(friedman_bundle, tmp_path):
    from nodecast.compiler.verify import verify

    emit(friedman_bundle, "onnx", tmp_path / "m.onnx")
    with pytest.raises(NodecastError, match="emulate"):
        verify(friedman_bundle, tmp_path / "m.onnx", emulate="cortex-m4")


@pytest.mark.skipif(not HAS_GCC, reason="needs gcc")
def test_two_models_in_one_folder_are_verified_by_naming_a_header(work, capsys):
    """The default C prefix is the bundle's name, so two models can share a firmware folder;
    verify then takes the header of the one to check."""
    (work / "pump.ncast").write_bytes((work / "m.ncast").read_bytes())
    for model in ("m", "pump"):
        assert run_cli(capsys, "emit", work / f"{model}.ncast", "--to", "c",
                       "--no-instruction-count", "-o", work / "fw").status == 0
    assert sorted(p.name for p in (work / "fw").iterdir()) == ["m.c", "m.h", "pump.c", "pump.h"]
    code, _, err = run_cli(capsys, "verify", work / "m.ncast", work / "fw", "--probes", "32")
    assert one_line_refusal(code, err) and "pump.h" in err and "naming its header" in err
    code, out, err = run_cli(capsys, "verify", work / "m.ncast", work / "fw" / "pump.h",
                             "--probes", "32")
    assert code == 0, out + err

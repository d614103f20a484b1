"""Categorical inputs end to end: the IR and bundle, the reference, and every back-end on every level
and on an unknown one.

Outside references: the diabetes data shipped with scikit-learn (Efron et al. 2004) with its sex
column as the categorical input; onnxruntime and the ONNX reference evaluator (the ONNX operator
specification, through the verify runners); the host C compiler.
"""

from __future__ import annotations

import csv
import io
import re
import shutil
import subprocess
import sys

import numpy as np
import pytest

from nodecast.compiler import emit, load, reference, save
from nodecast.compiler.csvio import read_table
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.levels import table_rows
from nodecast.compiler.verify import verify
from nodecast.compiler.verify.runners import runner

MODES = ("eco", "boost", "rinse", "idle")
OFFSETS = {"eco": 0.0, "boost": 3.0, "rinse": -2.0, "idle": 1.0}  # the known per-level offsets


def _write_synthetic(path, rows: int, seed: int) -> None:
    """An invented washing-machine motor: load and speed plus a programme with a known offset."""
    rng = np.random.default_rng(seed)
    load_kg, speed = rng.random(rows) * 8, 400 + rng.random(rows) * 1000
    mode = rng.choice(MODES, rows)
    power = (np.sin(load_kg / 2) + (speed / 1000) ** 2 + np.array([OFFSETS[m] for m in mode])
             + rng.normal(0, 0.05, rows))
    with open(path, "w", newline="") as handle:
        writer = csv.writer(handle)
        writer.writerow(["load_kg", "programme", "speed", "power"])
        for values in zip(load_kg, mode, speed, power, strict=True):
            writer.writerow([repr(float(values[0])), values[1], repr(float(values[2])),
                             repr(float(values[3]))])


def _train(*arguments):
    from nodecast.cli import main

    try:
        main(["train", *map(str, arguments)])
    except SystemExit as exc:
        assert exc.code in (0, None)


@pytest.fixture(scope="module")
def synthetic(tmp_path_factory):
    folder = tmp_path_factory.mktemp("categorical")
    _write_synthetic(folder / "motor.csv", 1500, 0)
    _write_synthetic(folder / "held_out.csv", 300, 1)
    _train(folder / "motor.csv", "--target", "power", "--categorical", "programme", "--nodes", 120,
           "-o", folder / "motor.ncast")
    return folder, load(folder / "motor.ncast")


@pytest.fixture(scope="module")
def diabetes(tmp_path_factory):
    from sklearn.datasets import load_diabetes  # Efron et al. (2004), shipped with scikit-learn

    folder = tmp_path_factory.mktemp("diabetes")
    frame = load_diabetes(as_frame=True, scaled=False).frame
    frame.to_csv(folder / "diabetes.csv", index=False)
    _train(folder / "diabetes.csv", "--target", "target", "--categorical", "sex", "--nodes", 80,
           "-o", folder / "diabetes.ncast")
    return folder, load(folder / "diabetes.ncast")


@pytest.mark.slow
def test_levels_are_listed_in_a_fixed_order_and_survive_the_bundle(synthetic, diabetes):
    _, net = synthetic[0], synthetic[1].network
    assert net.categorical_names == ("programme",)
    assert net.categorical_levels == (tuple(sorted(MODES)),)  # text levels: code point order
    assert net.feature_names == ("load_kg", "speed")
    assert net.level_weights.shape == (4, net.n_nodes) and not net.level_weights.flags.writeable
    # numbers as levels are ordered by value and spelled without a fraction (the CSV says 1.0, 2.0)
    assert diabetes[1].network.categorical_levels == (("1", "2"),)
    again = load(synthetic[0] / "motor.ncast")
    assert np.array_equal(again.network.level_weights, net.level_weights)


def test_training_recovers_the_known_per_level_offsets(synthetic):
    net = synthetic[1].network
    rng = np.random.default_rng(5)
    X = np.column_stack([rng.random(200) * 8, 400 + rng.random(200) * 1000])
    levels = net.categorical_levels[0]
    by_level = {level: reference.predict(net, np.column_stack([X, np.full(200, k)]))[:, 0]
                for k, level in enumerate(levels)}
    for level in levels:  # the same points, another programme: the output moves by the offset
        shift = np.mean(by_level[level] - by_level["eco"])
        assert abs(shift - (OFFSETS[level] - OFFSETS["eco"])) < 0.1, (level, shift)


def test_reference_semantics_of_unknown_levels(synthetic):
    net = synthetic[1].network
    rows = np.array([[4.0, 900.0, 1.0], [4.0, 900.0, -1.0], [4.0, 900.0, 7.0], [4.0, 900.0, 0.5]])
    assert reference.outside_domain(net, rows).tolist() == [False, True, True, True]
    numeric = net.replace(categorical_names=(), categorical_levels=(), level_weights=None)
    plain = reference.predict(numeric, np.repeat(rows[:1, :2], 3, axis=0))
    # (same shapes on both sides: a matrix product may round differently for another row count)
    assert np.array_equal(reference.predict(net, rows[1:], "pass"), plain)
    code0 = reference.predict(net, np.repeat([[4.0, 900.0, 0.0]], 3, axis=0))
    assert np.array_equal(reference.predict(net, rows[1:], "clamp"), code0)


def _artifacts(bundle, folder):
    paths = []
    for target, options in (("python", {"out_of_domain": "reject"}), ("python", {}),
                            ("onnx", {"precision": "float32"}),
                            ("onnx", {"precision": "float64", "out_of_domain": "clamp"}),
                            ("c", {"precision": "float32", "out_of_domain": "reject"}),
                            ("c", {"precision": "float64", "out_of_domain": "clamp"}),
                            ("c", {"precision": "float32"})):
        if target == "c" and shutil.which("gcc") is None and shutil.which("cc") is None:
            continue
        name = "-".join([target, *options.values()])
        path = folder / (name + {"python": ".py", "onnx": ".onnx", "c": ""}[target])
        emit(bundle, target, path, **options)
        paths.append(path)
    return paths


@pytest.mark.parametrize("model", ["synthetic", "diabetes"])
@pytest.mark.slow
def test_every_artifact_agrees_with_the_reference_on_every_level(request, model, tmp_path):
    folder, bundle = request.getfixturevalue(model)
    net = bundle.network
    data = "held_out.csv" if model == "synthetic" else "diabetes.csv"
    rows = table_rows(read_table(folder / data), net)
    for path in _artifacts(bundle, tmp_path):
        report = verify(bundle, path, rows, count=128).as_dict()
        assert report["passed"], (path.name, report["notes"])
        families = {f["family"] for f in report["families"]}
        assert "unknown-level" in families
        # the probes met every level of every categorical input
        module = runner(report["artifact"]["kind"])
        info = {**module.describe(path), "engine": report["artifact"]["engines"][0]}
        for k in range(len(net.categorical_levels[0])):
            probe = np.column_stack([rows[:20, : net.n_features], np.full(20, k)])
            got = module.run(path, probe, info)
            want = reference.predict(net, probe)
            assert np.max(np.abs(got - want)) <= max(report["tolerance"]["per_output"])


def test_c_table_is_indexed_by_the_codes_the_header_lists(synthetic, tmp_path):
    compiler = shutil.which("gcc") or shutil.which("cc")
    if compiler is None:
        pytest.skip("needs a C compiler")
    net = synthetic[1].network
    emit(synthetic[1], "c", tmp_path / "c", precision="float64", prefix="motor")
    header = (tmp_path / "c" / "motor.h").read_text()
    listed = dict((int(code), text) for code, text in re.findall(r"\*     (\d+) = \"([^\"]*)\"", header))
    assert listed == dict(enumerate(net.categorical_levels[0]))
    assert "#define MOTOR_N_LEVELS_0 4" in header
    main = tmp_path / "c" / "main.c"
    main.write_text("""#include <stdio.h>
#include "motor.h"
int main(void) {
    const double x[2] = {4.0, 900.0};
    double y[1];
    int code;
    for (code = -1; code <= MOTOR_N_LEVELS_0; ++code) {
        int status = motor_predict(x, &code, y);
        printf("%d %d %s %.17g\\n", code, status,
               code >= 0 && code < MOTOR_N_LEVELS_0 ? motor_level_names_0[code] : "-", y[0]);
    }
    return 0;
}
""")
    subprocess.run([compiler, "-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion",
                    "-Werror", "-O2", "-ffp-contract=off", "motor.c", "main.c", "-o", "probe",
                    "-lm"], cwd=tmp_path / "c", check=True)
    lines = subprocess.run([str(tmp_path / "c" / "probe")], capture_output=True, text=True,
                           check=True).stdout.split("\n")
    for line in lines[1:-2]:  # the known codes
        code, status, name, value = line.split()
        assert status == "0" and name == listed[int(code)]
        want = reference.predict(net, [[4.0, 900.0, float(code)]])[0, 0]
        assert abs(float(value) - want) <= 1e-10 * abs(want) + 1e-12
    # pass policy: an unknown code adds nothing, like the reference's all-zero one-hot
    unknown = reference.predict(net, [[4.0, 900.0, -1.0]])[0, 0]
    for line in (lines[0], lines[-2]):
        assert abs(float(line.split()[3]) - unknown) <= 1e-10 * abs(unknown) + 1e-12


def test_python_predictor_reads_level_text_and_rejects_an_unknown_level(synthetic, tmp_path):
    folder, bundle = synthetic
    path = tmp_path / "motor.py"
    emit(bundle, "python", path, out_of_domain="reject")
    data = tmp_path / "rows.csv"
    data.write_text("speed,programme,load_kg\n900, boost ,4\n900,laundry,4\n")
    done = subprocess.run([sys.executable, "-I", "-S", str(path), str(data)], capture_output=True,
                          text=True)
    assert done.returncode == 2 and done.stdout == ""
    message = done.stderr.strip()
    assert len(message.splitlines()) == 1 and "'programme'" in message and "laundry" in message
    done = subprocess.run([sys.executable, "-I", "-S", str(path), str(data), "--keep-going"],
                          capture_output=True, text=True, check=True)
    records = list(csv.reader(io.StringIO(done.stdout)))
    code = bundle.network.categorical_levels[0].index("boost")
    want = reference.predict(bundle.network, [[4.0, 900.0, code]])[0, 0]
    assert abs(float(records[1][0]) - want) <= 1e-10 * abs(want) and records[2] == ["nan"]


def test_onnx_takes_integer_codes_and_flags_an_unknown_level(synthetic, tmp_path):
    import onnxruntime as ort

    net = synthetic[1].network
    path = tmp_path / "motor.onnx"
    emit(synthetic[1], "onnx", path, precision="float64", flag_out_of_domain=True)
    session = ort.InferenceSession(str(path), providers=["CPUExecutionProvider"])
    assert [(i.name, i.type) for i in session.get_inputs()] == [
        ("features", "tensor(double)"), ("levels", "tensor(int64)")]
    codes = np.array([[0], [3], [-1], [4]], dtype=np.int64)
    x = np.tile([[4.0, 900.0]], (4, 1))
    outputs, flag = session.run(["outputs", "outside_domain"], {"features": x, "levels": codes})
    assert flag.tolist() == [False, False, True, True]
    want = reference.predict(net, np.column_stack([x, codes]), "pass")
    assert np.max(np.abs(outputs - want)) < 1e-10 * np.max(np.abs(want))
    meta = session.get_modelmeta().custom_metadata_map
    assert meta["nodecast.categorical_levels"] == '[["boost", "eco", "idle", "rinse"]]'


def test_fixed_point_is_refused_for_categorical_inputs(synthetic, tmp_path):
    with pytest.raises(NodecastError, match="categorical inputs"):
        emit(synthetic[1], "c", tmp_path / "q", precision="q15", out_of_domain="clamp")
    assert not (tmp_path / "q").exists()


def test_same_data_and_seed_give_the_same_bundle_bytes(synthetic, tmp_path):
    folder, bundle = synthetic
    _train(folder / "motor.csv", "--target", "power", "--categorical", "programme", "--nodes", 120,
           "-o", tmp_path / "again.ncast")
    assert (tmp_path / "again.ncast").read_bytes() == (folder / "motor.ncast").read_bytes()
    save(bundle, tmp_path / "saved.ncast")
    assert (tmp_path / "saved.ncast").read_bytes() == (folder / "motor.ncast").read_bytes()


HOSTILE = ('*/ int x; /*', '"""; import os; """', "\\\\", "new\nline", "??/", "caf\u00e9 \u2603")


def test_hostile_level_texts_stay_text_in_every_artifact(synthetic, tmp_path):
    import importlib.util

    bundle = synthetic[1]
    net = bundle.network.replace(categorical_names=('pro"gramme*/',),
                                 categorical_levels=(HOSTILE[:4],))
    hostile = type(bundle)(network=net, metadata=bundle.metadata)
    emit(hostile, "python", tmp_path / "p.py")
    spec = importlib.util.spec_from_file_location("hostile_levels", tmp_path / "p.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    assert module.CATEGORICAL_LEVELS == (HOSTILE[:4],)
    for code, level in enumerate(HOSTILE[:4]):
        want = reference.predict(net, [[4.0, 900.0, code]])[0, 0]
        assert abs(module.predict([4.0, 900.0, level])[0] - want) <= 1e-10 * abs(want)
    emit(hostile, "onnx", tmp_path / "m.onnx")
    compiler = shutil.which("gcc") or shutil.which("cc")
    if compiler is not None:
        emit(hostile, "c", tmp_path / "c", precision="float64")
        (tmp_path / "c" / "main.c").write_text("""#include <stdio.h>
#include "model.h"
int main(void) {
    int k;
    const char *p;
    for (k = 0; k < MODEL_N_LEVELS_0; ++k) {
        for (p = model_level_names_0[k]; *p; ++p) printf("%02x", (unsigned)(unsigned char)*p);
        printf("\\n");
    }
    return 0;
}
""")
        subprocess.run([compiler, "-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Werror",
                        "-Wtrigraphs", "model.c", "main.c", "-o", "names", "-lm"],
                       cwd=tmp_path / "c", check=True)
        printed = subprocess.run([str(tmp_path / "c" / "names")], capture_output=True, text=True,
                                 check=True).stdout.split()
        assert printed == [level.encode("utf-8").hex() for level in HOSTILE[:4]]


@pytest.mark.parametrize("levels", [("a", "a"), ("a", " b"), ("",), ("a\x00",), ()])
def test_unusable_levels_are_refused_by_the_ir(synthetic, levels):
    net = synthetic[1].network
    weights = np.zeros((len(levels), net.n_nodes))
    with pytest.raises(NodecastError, match="categorical"):
        net.replace(categorical_levels=(levels,), level_weights=weights)


@pytest.mark.slow
def test_level_tables_run_on_an_emulated_cortex_m4(synthetic, tmp_path):
    if shutil.which("arm-none-eabi-gcc") is None or shutil.which("qemu-system-arm") is None:
        pytest.skip("needs arm-none-eabi-gcc and qemu-system-arm")
    emit(synthetic[1], "c", tmp_path / "c", precision="float32", out_of_domain="reject")
    report = verify(synthetic[1], tmp_path / "c", None, count=64, emulate="cortex-m4").as_dict()
    assert report["passed"], report["notes"]
    unknown = [f for f in report["families"] if f["family"] == "unknown-level"][0]
    assert unknown["rejected"] == unknown["count"] > 0

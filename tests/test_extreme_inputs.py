"""Extreme inference inputs in every target: +-1e308, +-inf, NaN, subnormals, values far outside the
domain. The behaviour is the one docs/reliability.md tabulates; nothing raises, nothing crashes, and
the C code runs clean under UndefinedBehaviorSanitizer and AddressSanitizer.

Facts of IEEE 754 binary64 used below: tanh saturates to exactly +-1 for |z| > ~19.1 (so a node
driven by an infinite input gives the same value as one driven by 1e30), NaN propagates through
+, * and tanh, and inf - inf is NaN (IEEE 754-2019, 7.2).
"""

from __future__ import annotations

import importlib.util
import math
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from nodecast.compiler import emit, reference
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.ir import Network
from nodecast.compiler.verify.runners import runner

TINY = 2.0**-1074  # the smallest subnormal binary64
SPECIALS = {"+1e308": 1e308, "-1e308": -1e308, "+inf": math.inf, "-inf": -math.inf,
            "nan": math.nan, "subnormal": TINY, "-0.0": -0.0, "+1e30": 1e30, "-1e30": -1e30,
            "float32 max+": 3.5e38, "float64 max": np.finfo(np.float64).max, "zero": 0.0,
            "inside": 20.0}


def _bundle() -> Bundle:
    rng = np.random.default_rng(7)
    n, m = 2, 6
    net = Network(hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
                  activation="logistic", output_weights=rng.normal(size=(m, 1)),
                  output_bias=[0.1], input_offset=[10.0, -5.0], input_scale=[20.0, 10.0],
                  output_offset=[3.0], output_scale=[2.0], domain_low=[10.0, -5.0],
                  domain_high=[30.0, 5.0], feature_names=("temp", "load"), target_names=("y",))
    return Bundle(net, {})


BUNDLE = _bundle()
NET = BUNDLE.network
INSIDE = 0.0  # the second feature's value in every extreme row (inside its domain [-5, 5])


def extreme_rows() -> np.ndarray:
    """One row per special value in the first feature; the second stays inside its domain."""
    return np.array([[value, INSIDE] for value in SPECIALS.values()])


def _quiet_reference(X, policy="pass"):
    with np.errstate(over="ignore", invalid="ignore"):
        return reference.predict(NET, X, "clamp" if policy == "clamp" else "pass")


def expected(policy: str) -> np.ndarray:
    """The documented result per row: the reference, with rejected rows as NaN."""
    X = extreme_rows()
    want = _quiet_reference(X, policy)
    if policy == "reject":
        want[reference.outside_domain(NET, X)] = np.nan
    return want


def test_reference_behaviour_on_extreme_inputs():
    X = extreme_rows()
    out = dict(zip(SPECIALS, _quiet_reference(X)[:, 0], strict=True))
    assert math.isnan(out["nan"])  # NaN propagates (IEEE 754)
    # every node saturates: infinite and merely huge inputs give one and the same finite output
    # (compared to 1e-13: a BLAS may sum different rows of one product in different orders)
    same = pytest.approx
    for sign in "+-":
        assert math.isfinite(out[f"{sign}inf"])
        assert out[f"{sign}inf"] == same(out[f"{sign}1e308"], rel=1e-13)
        assert out[f"{sign}inf"] == same(out[f"{sign}1e30"], rel=1e-13)
    assert out["float64 max"] == same(out["+inf"], rel=1e-13)
    assert out["float32 max+"] == same(out["+inf"], rel=1e-13)
    # a subnormal or a negative zero is, to the model, zero
    assert out["subnormal"] == same(out["zero"], rel=1e-13)
    assert out["-0.0"] == same(out["zero"], rel=1e-13)
    clamped = dict(zip(SPECIALS, _quiet_reference(X, "clamp")[:, 0], strict=True))
    low, high = _quiet_reference(np.array([[10.0, INSIDE], [30.0, INSIDE]]))[:, 0]
    for value in ("+inf", "+1e308", "float64 max"):
        assert clamped[value] == same(high, rel=1e-13)
    for value in ("-inf", "-1e308", "zero", "subnormal"):
        assert clamped[value] == same(low, rel=1e-13)
    assert math.isnan(clamped["nan"])


def test_two_opposite_infinities_make_nan_under_pass_and_not_under_clamp():
    # inf - inf is NaN (IEEE 754-2019 7.2): a node fed +inf and -inf through weights of the same
    # sign has no defined pre-activation; clamping first keeps every pre-activation finite
    signs = np.sign(NET.hidden_weights)
    row = np.array([[math.inf, -math.inf] if (signs[:, 0] == signs[:, 1]).any()
                     else [math.inf, math.inf]])
    assert math.isnan(_quiet_reference(row)[0, 0])
    assert math.isfinite(_quiet_reference(row, "clamp")[0, 0])


ARTIFACTS = [("onnx", "float64", "pass"), ("onnx", "float32", "pass"), ("onnx", "float32", "clamp"),
             ("python", "float64", "pass"), ("python", "float64", "clamp"),
             ("python", "float64", "reject"), ("c", "float64", "pass"), ("c", "float32", "clamp"),
             ("c", "float32", "reject"), ("c", "q15", "clamp"), ("c", "q31", "reject")]


@pytest.fixture(scope="module")
def artifact_folder(tmp_path_factory):
    return tmp_path_factory.mktemp("extremes")


def _emit(kind, precision, policy, folder: Path) -> Path:
    suffix = {"onnx": ".onnx", "python": ".py", "c": ""}[kind]
    path = folder / f"{kind}-{precision}-{policy}{suffix}"
    if not path.exists():
        emit(BUNDLE, kind, path, precision=precision, out_of_domain=policy)
    return path


@pytest.mark.parametrize("kind, precision, policy", ARTIFACTS,
                         ids=["-".join(a) for a in ARTIFACTS])
def test_every_target_follows_the_documented_table(kind, precision, policy, artifact_folder):
    if kind == "c" and shutil.which("gcc") is None:
        pytest.skip("needs gcc")
    path = _emit(kind, precision, policy, artifact_folder)
    run = runner(kind)
    with np.errstate(over="ignore", invalid="ignore"):  # casting 1e308 to float32 gives inf
        got = run.run(path, extreme_rows(), run.describe(path))
    want = expected(policy)
    assert np.array_equal(np.isnan(got), np.isnan(want)), dict(zip(SPECIALS, got[:, 0],
                                                                   strict=True))
    finite = ~np.isnan(want)
    # a Q15 step is 2^-15 of the scaled range; float32 rounding at eps 2^-23 (IEEE 754)
    tolerance = {"float64": 1e-12, "float32": 1e-4, "q31": 1e-4, "q15": 2e-2}[precision]
    assert np.max(np.abs(got[finite] - want[finite])) < tolerance


@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(st.lists(st.floats(allow_nan=True, allow_infinity=True, width=64), min_size=2, max_size=2))
def test_python_predictor_never_raises_and_matches_the_reference(artifact_folder_module, row):
    module = artifact_folder_module
    got = module.predict(row)
    want = _quiet_reference(np.array([row]))[0]
    assert np.allclose(got, want, rtol=1e-12, atol=1e-12, equal_nan=True)


@pytest.fixture(scope="module")
def artifact_folder_module(artifact_folder):
    path = _emit("python", "float64", "pass", artifact_folder)
    spec = importlib.util.spec_from_file_location("extreme_predictor", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


SANITIZE = ("-fsanitize=undefined,float-cast-overflow,float-divide-by-zero,address",
            "-fno-sanitize-recover=all", "-g")


def _sanitizers_work(folder: Path) -> bool:
    source = folder / "probe.c"
    source.write_text("int main(void) { return 0; }\n")
    built = subprocess.run(["gcc", *SANITIZE, str(source), "-o", str(folder / "probe")],
                           capture_output=True)
    return built.returncode == 0


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
@pytest.mark.parametrize("precision, policy", [("float64", "pass"), ("float32", "reject"),
                                               ("q15", "clamp"), ("q31", "reject")])
def test_c_code_is_clean_under_sanitizers_on_extreme_inputs(precision, policy, artifact_folder):
    from nodecast.compiler.verify.runners import c as c_runner

    if not _sanitizers_work(artifact_folder):
        pytest.skip("gcc has no sanitizer runtime here")
    path = _emit("c", precision, policy, artifact_folder)
    values = list(SPECIALS.values())
    rows = np.array([[a, b] for a in values for b in values])  # every pair, both features
    info = c_runner.describe(path)
    text = c_runner.run_host(path, rows, info, extra_flags=SANITIZE)  # raises on a sanitizer stop
    statuses = np.array([int(line.split()[0]) for line in text.splitlines()[:-1]])
    nan_rows = np.isnan(rows).any(axis=1)
    outside = reference.outside_domain(NET, rows) & ~nan_rows
    assert np.all(statuses[nan_rows] == 1)  # <PREFIX>_ERROR_NAN_INPUT
    assert np.all(statuses[outside] == (2 if policy == "reject" else 0))
    assert np.all(statuses[~nan_rows & ~outside] == 0)


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")
def test_c_fixed_point_conversion_macro_is_defined_for_nan(artifact_folder):
    if not _sanitizers_work(artifact_folder):
        pytest.skip("gcc has no sanitizer runtime here")
    folder = artifact_folder / "macro"
    folder.mkdir(exist_ok=True)
    emit(BUNDLE, "c", folder, precision="q15", out_of_domain="clamp", prefix="fan",
         overwrite=True)
    (folder / "m.c").write_text('#include <math.h>\n#include "fan.h"\n'
                                "int main(void) { volatile double v = NAN;\n"
                                "  return (int)FAN_INPUT_FROM_REAL(0, v) == 12345; }\n")
    built = subprocess.run(["gcc", "-std=c99", *SANITIZE, "m.c", "fan.c", "-lm", "-o", "m"],
                           cwd=folder, capture_output=True, text=True)
    assert built.returncode == 0, built.stderr
    ran = subprocess.run(["./m"], cwd=folder, capture_output=True, text=True)
    assert ran.returncode == 0 and "runtime error" not in ran.stderr


def test_cli_predict_writes_nan_for_nan_rows_and_stays_quiet(tmp_path):
    from nodecast.compiler.bundle import save

    save(BUNDLE, tmp_path / "m.ncast")
    (tmp_path / "rows.csv").write_text("temp,load\n1e308,1e308\nnan,0\ninf,-inf\n5e-324,0\n")
    result = subprocess.run([sys.executable, "-m", "nodecast.cli", "predict", "m.ncast",
                             "rows.csv"], cwd=tmp_path, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0 and result.stderr == ""
    lines = result.stdout.splitlines()
    assert lines[0] == "y" and lines[2] == "nan" and len(lines) == 5
    want = _quiet_reference(np.array([[1e308, 1e308], [math.nan, 0], [math.inf, -math.inf],
                                      [TINY, 0.0]]))[:, 0]
    assert [float(v) for v in lines[1:]] == pytest.approx(want.tolist(), nan_ok=True, rel=0)

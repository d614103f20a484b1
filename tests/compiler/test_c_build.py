"""The generated C builds warning-free as C99, as C++ and for a Cortex-M0, and hostile names in the
bundle never become code."""

from __future__ import annotations

import re
import subprocess

import numpy as np
import pytest

from nodecast.compiler import emit
from nodecast.compiler.bundle import Bundle
from tests.compiler.c_support import STRICT, emit_c, need

VARIANTS = [("float64", "libm", "pass"), ("float32", "libm", "reject"),
            ("float32", "rational", "clamp"), ("float64", "table", "reject"),
            ("float32", "table", "pass"), ("q31", "table", "reject"), ("q15", "table", "clamp")]
COMPILERS = {
    "gcc": ("gcc", *STRICT, "-O2"),
    "g++": ("g++", "-x", "c++", *STRICT[1:], "-O2"),  # the same warnings, compiled as C++
    "arm-none-eabi-gcc": ("arm-none-eabi-gcc", "-mcpu=cortex-m0", "-mthumb", "-Os", *STRICT),
}
PAYLOAD = '*/ int injected_symbol = 1; /*'
HOSTILE_FEATURES = (f"temp{PAYLOAD}", 'say "hi" \\ back', "// line\nnext ??= ??/",
                    "d\u00e9bit \u2103")
HOSTILE_CLASSES = (f'low{PAYLOAD}', 'mid "\\" ??/', "h\u00f6ch\n\U0001f525")


def _compile(compiler: str, folder, source: str = "model.c") -> subprocess.CompletedProcess:
    need(compiler)
    command = [*COMPILERS[compiler], "-c", source, "-o", "out.o"]
    return subprocess.run(command, cwd=folder, capture_output=True, text=True, check=False)


@pytest.fixture(scope="module")
def small_bundle(friedman_bundle_factory):
    return friedman_bundle_factory(n_nodes=24, rows=300, seed=3)


@pytest.mark.parametrize("compiler", sorted(COMPILERS))
@pytest.mark.parametrize("precision, impl, policy", VARIANTS)
def test_builds_without_a_single_warning(small_bundle, tmp_path, compiler, precision, impl, policy):
    emit_c(small_bundle, tmp_path, precision=precision, activation_impl=impl, out_of_domain=policy)
    done = _compile(compiler, tmp_path)
    assert done.returncode == 0 and done.stderr == "", done.stderr


@pytest.mark.parametrize("compiler", sorted(COMPILERS))
@pytest.mark.parametrize("precision", ["float32", "q15"])
def test_classifier_builds_without_a_single_warning(classifier_bundle, tmp_path, compiler,
                                                    precision):
    policy = "clamp" if precision == "q15" else "pass"
    emit_c(classifier_bundle, tmp_path, prefix="iris", precision=precision, out_of_domain=policy)
    done = _compile(compiler, tmp_path, "iris.c")
    assert done.returncode == 0 and done.stderr == "", done.stderr


def _hostile_bundle(classifier_bundle) -> Bundle:
    net = classifier_bundle.network
    return Bundle(net.replace(feature_names=HOSTILE_FEATURES, feature_units=("\u00b0C */",) * 4,
                              class_labels=HOSTILE_CLASSES, target_names=HOSTILE_CLASSES),
                  classifier_bundle.metadata)


NAMES_MAIN = r"""
#include <stdio.h>
#include "model.h"
int main(void)
{
    int i;
    for (i = 0; i < MODEL_N_OUTPUTS; ++i) {
        fputs(model_class_names[i], stdout);
        fputc(0, stdout);
    }
    return 0;
}
"""


@pytest.mark.parametrize("precision", ["float32", "q15"])
def test_hostile_names_stay_text(classifier_bundle, tmp_path, precision):
    need("gcc", "nm")
    policy = "clamp" if precision == "q15" else "pass"
    emit_c(_hostile_bundle(classifier_bundle), tmp_path, precision=precision, out_of_domain=policy)
    assert PAYLOAD not in (tmp_path / "model.h").read_text(encoding="ascii")  # comments only
    done = _compile("gcc", tmp_path)
    assert done.returncode == 0 and done.stderr == "", done.stderr
    (tmp_path / "names.c").write_text(NAMES_MAIN)
    subprocess.run(["gcc", *STRICT, "-O2", "model.c", "names.c", "-o", "names", "-lm"],
                   cwd=tmp_path, check=True)
    symbols = subprocess.run(["nm", "names"], cwd=tmp_path, capture_output=True, text=True,
                             check=True).stdout
    assert "injected_symbol" not in symbols and "model_predict" in symbols
    # The table holds each label's exact UTF-8 bytes (ISO C99 6.4.4.4: octal escapes are bytes).
    printed = subprocess.run(["./names"], cwd=tmp_path, capture_output=True, check=True).stdout
    assert printed.split(b"\0")[:-1] == [label.encode("utf-8") for label in HOSTILE_CLASSES]


def test_footprint_figures_match_the_tables(small_bundle, tmp_path):
    need("gcc", "size")
    from nodecast.compiler.toolchain import footprint

    artifact = emit(small_bundle, "c", tmp_path, overwrite=True, precision="float32",
                    activation_impl="libm", out_of_domain="reject")
    figures = footprint(artifact.files, "model")["host"]
    net = small_bundle.network
    # float32 tables: hidden weights and biases, output weights and bias, the domain's two bounds
    tables = 4 * (net.hidden_weights.size + 2 * net.n_nodes + 1 + 2 * net.n_features)
    assert tables <= figures["const"] <= tables + 256
    assert figures["stack"] >= artifact.summary["scratch_bytes"] - 128  # x86-64 red zone: 128 B
    assert figures["code"] > 0 and figures["data"] == 0 and figures["bss"] == 0
    assert figures["calls"] == ["tanhf"]


def test_every_weight_is_written_exactly(small_bundle, tmp_path):
    """float64 literals read back as the IR's exact values (17 significant digits, IEEE 754)."""
    from nodecast.compiler.passes.scaling import folded_input_layer, should_fold_inputs

    emit_c(small_bundle, tmp_path, precision="float64", out_of_domain="pass")
    source = (tmp_path / "model.c").read_text()
    biases = source.split("model_hidden_biases[")[1].split("= {")[1].split("};")[0]
    values = np.array([float(v) for v in re.sub(r"[{}\n]", " ", biases).split(",") if v.strip()])
    net = small_bundle.network
    expected = folded_input_layer(net)[1] if should_fold_inputs(net) else net.hidden_biases
    padding = values[net.n_nodes:]  # the last tile's copies of the last node
    assert np.array_equal(values[:net.n_nodes], expected) and np.all(padding == expected[-1])

"""Helpers shared by the C back-end tests (imported by the test_c_* modules; holds one self-check).

Tests that need a compiler or QEMU skip with the reason when the tool is missing, except under CI
(``CI=true``), where a missing toolchain is a failure: CI installs it (.ci/run).
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from nodecast.compiler import emit
from nodecast.compiler.bundle import Bundle
from nodecast.compiler.ir import Network
from nodecast.compiler.verify.runners import c as c_runner

STRICT = ("-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wshadow",
          "-Wdouble-promotion", "-Werror")
# IEEE 754 binary64 extremes: the largest finite values, infinities, NaN, the smallest subnormal and
# normal numbers, signed zero, and values beyond float32's range (3.4028235e38 is FLT_MAX).
EXTREMES = (1e308, -1e308, np.inf, -np.inf, np.nan, 5e-324, -5e-324, 2.2250738585072014e-308,
            -0.0, 3.4028235e38, 3.5e38, -3.5e38)
INSTALL_HINT = ("apt-get install --no-install-recommends gcc g++ gcc-arm-none-eabi "
                "libnewlib-arm-none-eabi qemu-system-arm")


def need(*tools: str) -> None:
    """Skip (fail under CI=true) unless every tool is on PATH."""
    missing = [tool for tool in tools if shutil.which(tool) is None]
    if missing:
        reason = f"needs {', '.join(missing)} ({INSTALL_HINT})"
        if os.environ.get("CI") == "true":
            pytest.fail(f"CI must have the C toolchain: {reason}")
        pytest.skip(reason)


def emit_c(bundle, folder: Path, prefix: str = "model", **options) -> Path:
    emit(bundle, "c", folder, overwrite=True, prefix=prefix, **options)
    return folder


def run_c(folder: Path, X, emulate: str | None = None, extra_flags=()) -> np.ndarray:
    """The artifact's outputs for rows X, built on the host (or emulated)."""
    info = c_runner.describe(folder, emulate=emulate)
    if emulate or not extra_flags:
        return c_runner.run(folder, X, info)
    text = c_runner.run_host(folder, np.asarray(X, dtype=np.float64), info, extra_flags)
    return c_runner.parse_output(text, len(X), info)


def extreme_rows(net) -> np.ndarray:
    """Each extreme in one feature (the others mid-domain), then in every feature at once."""
    middle = 0.5 * (net.domain_low + net.domain_high)
    rows = []
    for value in EXTREMES:
        for i in range(net.n_features):
            row = middle.copy()
            row[i] = value
            rows.append(row)
        rows.append(np.full(net.n_features, value))
    return np.array(rows)


def single_node_bundle(activation: str, reach: float = 8.0) -> Bundle:
    """y = g(x) on the domain [-reach, reach]: one node of weight 1 and bias 0 on the raw input, so
    the output is the artifact's activation itself (tanh or logistic)."""
    span = 2.0 * reach
    net = Network(
        hidden_weights=[[span]], hidden_biases=[-reach], activation=activation,
        output_weights=[[1.0]], output_bias=[0.0], input_offset=[-reach], input_scale=[span],
        output_offset=[0.0], output_scale=[1.0], domain_low=[-reach], domain_high=[reach],
        feature_names=("z",), target_names=("g",))
    return Bundle(network=net, metadata={})


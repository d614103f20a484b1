"""The generated C on emulated Cortex-M CPUs (QEMU's MPS2 boards) against the host build: fixed
point bit for bit, libm-free float32 within 2 ulp, and float32 with each platform's libm within the
float32 tolerance through verify. Few runs, each with every input row in one image."""

from __future__ import annotations

import subprocess

import numpy as np
import pytest

from nodecast.compiler.verify import verify
from nodecast.compiler.verify.probes import probe_families
from nodecast.compiler.verify.runners import c as c_runner
from nodecast.compiler.verify.runners import qemu
from tests.compiler.c_support import emit_c, extreme_rows, need, run_c

EMULATION_TOOLS = ("gcc", "arm-none-eabi-gcc", "qemu-system-arm")


@pytest.fixture(scope="module")
def small_bundle(friedman_bundle_factory):
    return friedman_bundle_factory(n_nodes=40, rows=400, seed=4)


def _rows(net, extremes: bool) -> np.ndarray:
    probes = np.vstack([family.X for family in probe_families(net, None, 192, 1)])
    if not extremes:
        return probes
    finite = extreme_rows(net)
    return np.vstack([probes, finite[~np.any(np.isnan(finite), axis=1)]])


@pytest.mark.parametrize("precision, cpu", [("q15", "cortex-m3"), ("q31", "cortex-m4")])
def test_fixed_point_is_bit_for_bit_the_host_build(small_bundle, tmp_path, precision, cpu):
    need(*EMULATION_TOOLS)
    emit_c(small_bundle, tmp_path, precision=precision, out_of_domain="clamp")
    X = _rows(small_bundle.network, extremes=True)
    host, target = run_c(tmp_path, X), run_c(tmp_path, X, emulate=cpu)
    assert np.isfinite(host).all() and np.array_equal(host, target)


def test_libm_free_float32_is_within_2_ulp_of_the_host(small_bundle, tmp_path):
    need(*EMULATION_TOOLS)
    emit_c(small_bundle, tmp_path, precision="float32", activation_impl="rational",
           out_of_domain="reject")
    X = _rows(small_bundle.network, extremes=True)
    host, target = run_c(tmp_path, X), run_c(tmp_path, X, emulate="cortex-m4")
    assert np.array_equal(np.isnan(host), np.isnan(target))  # the same rows rejected
    kept = ~np.isnan(host)
    ulp = np.spacing(np.abs(host[kept]).astype(np.float32)).astype(np.float64)  # IEEE 754 ulp
    assert np.all(np.abs(host[kept] - target[kept]) <= 2 * ulp)


def test_verify_emulated_cortex_m4_with_newlib_libm(small_bundle, tmp_path):
    need(*EMULATION_TOOLS)
    emit_c(small_bundle, tmp_path, precision="float32", activation_impl="libm")
    report = verify(small_bundle, tmp_path, count=256, emulate="cortex-m4").as_dict()
    assert report["passed"], report["notes"]
    assert report["artifact"]["engines"] == ["qemu-cortex-m4"]
    assert report["max_abs_error"] > 0  # the emulated run really computed in float32


def test_the_cortex_m4_image_uses_its_fpu(small_bundle, tmp_path):
    """FPU instructions in the image, which runs to the end only if the start-up code enabled the
    FPU (a VFP instruction with CP10/CP11 disabled faults: Armv7-M Architecture Reference Manual,
    from memory)."""
    need(*EMULATION_TOOLS, "arm-none-eabi-objdump")
    emit_c(small_bundle, tmp_path / "model", precision="float32", activation_impl="rational")
    info = c_runner.describe(tmp_path / "model", emulate="cortex-m4")
    (tmp_path / "image").mkdir()
    image = qemu.build_image(tmp_path / "model", _rows(small_bundle.network, False)[:4], info,
                             tmp_path / "image")
    listing = subprocess.run(["arm-none-eabi-objdump", "-d", str(image)], capture_output=True,
                             text=True, check=True).stdout
    assert "vdiv.f32" in listing and "vmul.f32" in listing
    assert np.isfinite(run_c(tmp_path / "model", _rows(small_bundle.network, False)[:4],
                             emulate="cortex-m4")).all()

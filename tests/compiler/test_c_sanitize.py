"""The generated C under AddressSanitizer and UndefinedBehaviorSanitizer (GCC), over the verify
probes and extreme inputs: every run must end cleanly, and every status must follow the policy."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import reference
from nodecast.compiler.verify.probes import probe_families
from tests.compiler.c_support import emit_c, extreme_rows, need, run_c

SANITIZE = ("-fsanitize=address,undefined,float-cast-overflow", "-fno-sanitize-recover=all",
            "-fno-omit-frame-pointer", "-g")
VARIANTS = [("float32", "rational", "pass"), ("float64", "libm", "reject"),
            ("float32", "table", "clamp"), ("q15", "table", "clamp"), ("q31", "table", "reject")]


@pytest.mark.parametrize("precision, impl, policy", VARIANTS)
def test_probes_and_extremes_run_clean_under_sanitizers(friedman_bundle_factory, tmp_path,
                                                        monkeypatch, precision, impl, policy):
    need("gcc")
    monkeypatch.setenv("ASAN_OPTIONS", "detect_leaks=0:abort_on_error=0")
    bundle = friedman_bundle_factory(n_nodes=40, rows=400, seed=7)
    net = bundle.network
    emit_c(bundle, tmp_path, precision=precision, activation_impl=impl, out_of_domain=policy)
    probes = np.vstack([family.X for family in probe_families(net, None, 256, 0)])
    extremes = extreme_rows(net)
    got = run_c(tmp_path, np.vstack([probes, extremes]), extra_flags=SANITIZE)  # raises on a report
    got_probes, got_extremes = got[: len(probes)], got[len(probes):]
    nan_rows = np.any(np.isnan(extremes), axis=1)
    assert np.all(np.isnan(got_extremes[nan_rows]))  # NaN input: a non-zero status, no outputs
    outside = reference.outside_domain(net, extremes) & ~nan_rows
    if policy == "reject":
        assert np.all(np.isnan(got_extremes[outside]))
        assert np.array_equal(np.all(np.isnan(got_probes), axis=1),
                              reference.outside_domain(net, probes))
    elif policy == "clamp":
        want = reference.predict(net, np.where(nan_rows[:, None], 0.0, extremes), "clamp")
        assert np.all(np.isfinite(got_extremes[~nan_rows]))
        spread = np.ptp(reference.predict(net, probes, "clamp"))
        assert np.max(np.abs(got_extremes[~nan_rows] - want[~nan_rows])) < 0.05 * spread
    else:  # evaluated as given; inputs near FLT_MAX may overflow float32 (IEEE 754: inf - inf)
        finite = np.all(np.abs(extremes) <= 1e30, axis=1)
        assert np.all(np.isfinite(got_extremes[finite]))
        assert not np.any(np.isnan(got_probes))


def test_the_sanitizers_catch_a_read_past_a_table(friedman_bundle_factory, tmp_path, monkeypatch):
    """The same build, with the interpolation reading past the table's end: ASan must stop it."""
    need("gcc")
    from nodecast.compiler.errors import NodecastError

    monkeypatch.setenv("ASAN_OPTIONS", "detect_leaks=0")
    bundle = friedman_bundle_factory(n_nodes=40, rows=400, seed=7)
    emit_c(bundle, tmp_path, precision="q15", out_of_domain="clamp")
    source = tmp_path / "model.c"
    text = source.read_text()
    assert text.count("model_tanh_table[k + 1]") == 1
    source.write_text(text.replace("model_tanh_table[k + 1]", "model_tanh_table[k + 513]"))
    middle = 0.5 * (bundle.network.domain_low + bundle.network.domain_high)
    with pytest.raises(NodecastError, match="failed"):
        run_c(tmp_path, middle[None, :], extra_flags=SANITIZE)


NAN_MAIN = r"""
#include <math.h>
#include <stdio.h>
#include "model.h"
int main(void)
{
    volatile double nan_value = NAN;
    WORD x[MODEL_N_INPUTS];
    WORD y[MODEL_N_OUTPUTS];
    int i;
    for (i = 0; i < MODEL_N_INPUTS; ++i) {
        x[i] = MODEL_Q_FROM_REAL(nan_value, MODEL_INPUT_SCALE_0);
    }
    printf("%ld %d\n", (long)x[0], model_predict(x, y));
    return 0;
}
"""


@pytest.mark.parametrize("precision, word, minimum", [("q15", "int16_t", -2**15),
                                                      ("q31", "int32_t", -2**31)])
def test_conversion_macro_maps_nan_outside_the_domain(friedman_bundle_factory, tmp_path,
                                                      monkeypatch, precision, word, minimum):
    """No undefined float-to-integer conversion of NaN (C99 6.3.1.4): NaN becomes the word's
    minimum, which a rejecting artifact refuses."""
    need("gcc")
    import subprocess

    monkeypatch.setenv("ASAN_OPTIONS", "detect_leaks=0")
    bundle = friedman_bundle_factory(n_nodes=40, rows=400, seed=7)
    emit_c(bundle, tmp_path, precision=precision, out_of_domain="reject")
    (tmp_path / "nan.c").write_text(NAN_MAIN)
    subprocess.run(["gcc", "-std=c99", f"-DWORD={word}", *SANITIZE, "model.c", "nan.c", "-o",
                    "nan", "-lm"], cwd=tmp_path, check=True)
    ran = subprocess.run(["./nan"], cwd=tmp_path, capture_output=True, text=True, check=True)
    assert ran.stdout.split() == [str(minimum), "2"] and "runtime error" not in ran.stderr

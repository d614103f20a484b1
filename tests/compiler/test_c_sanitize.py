"""The generated C under AddressSanitizer and UndefinedBehaviorSanitizer (GCC), over the verify
probes and extreme inputs: every run must end cleanly, and every status must follow the policy."""

from __future__ import annotations

import numpy as np
import pytest
from test_c_support import emit_c, extreme_rows, need, run_c

from nodecast.compiler import reference
from nodecast.compiler.verify.probes import probe_families

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

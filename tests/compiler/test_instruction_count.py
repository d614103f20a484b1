"""Instructions per prediction on emulated Cortex-M0 and Cortex-M4F (QEMU -icount and SysTick):
the method counts exactly what a hand-written function executes, the counts repeat across runs,
they grow linearly with the nodes, and emit and inspect print them beside the footprint."""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from nodecast.cli import cli
from nodecast.compiler import instruction_count as ic
from nodecast.compiler import save
from nodecast.compiler.backends import render
from nodecast.compiler.errors import NodecastError
from tests.compiler.c_support import need

TOOLS = ("arm-none-eabi-gcc", "qemu-system-arm")
_FAKE_HEADER = b"""#ifndef FAKE_H
#define FAKE_H
#include <stdint.h>
#define FAKE_N_INPUTS 1
#define FAKE_N_OUTPUTS 1
#define FAKE_OK 0
#define FAKE_ERROR_NAN_INPUT 1
#define FAKE_INPUT_SCALE_0 256.0
#define FAKE_Q_FROM_REAL(v, s) ((int16_t)((v) * (s)))
int fake_predict(const int16_t *x, int16_t *y);
#endif
"""


def _fake_files(nops: int) -> dict[str, bytes]:
    """A function whose body is exactly ``nops`` NOP instructions (plus its return)."""
    body = "".join("        \"nop\\n\"\n" for _ in range(nops))
    source = ("#include \"fake.h\"\nint fake_predict(const int16_t *x, int16_t *y)\n{\n"
              f"    __asm__ volatile(\n{body}        ::: \"memory\");\n"
              "    y[0] = x[0];\n    return FAKE_OK;\n}\n")
    return {"fake.h": _FAKE_HEADER, "fake.c": source.encode()}


@pytest.mark.parametrize("core", list(ic.COUNT_CORES))
def test_a_known_instruction_sequence_is_counted_exactly(tmp_path, core):
    """300 more NOPs are 300 more instructions, on both cores (fact of the trade: a NOP is one
    Thumb instruction, and a straight-line body executes each of its instructions once)."""
    need(*TOOLS)
    info = {"prefix": "fake", "precision": "q15", "n_inputs": 1}
    X = np.array([[0.5], [1.0], [-2.0]])
    short = ic.count_instructions(_fake_files(100), info, X, core)
    long = ic.count_instructions(_fake_files(400), info, X, core)
    assert np.all(long - short == 300)
    assert np.all(short >= 100) and np.all(short < 130)  # the body, the copy, call and return


@pytest.fixture(scope="module")
def ten_input_bundles():
    """10-input Friedman #1 models (sklearn make_friedman1; Friedman 1991) of 25, 50, 100 nodes."""
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(600, n_features=10, noise=1.0, random_state=0)
    return {m: to_bundle(RandomNodeRegressor(n_nodes=m, random_state=0).fit(X, y))
            for m in (25, 50, 100)}


def _median_counts(bundle, core, **options):
    artifact = render(bundle, "c", prefix="model", **options)
    info = {"prefix": "model", "precision": options["precision"],
            "n_inputs": bundle.network.n_features}
    X = ic.counting_rows(bundle.network)[:48]
    return ic.count_instructions(artifact.files, info, X, core)


@pytest.mark.slow
def test_counts_repeat_across_runs_and_grow_linearly_with_nodes(ten_input_bundles):
    need(*TOOLS)
    # per-layer scales: their cost per node is the same for every node, so the count is linear
    # in the nodes; per-node scales (the default) cost what each node's formats and the output
    # layer's groups (at most 8) need, which depends on the weights (measured on these models:
    # 6,772, 12,961 and 31,319 instructions at 25, 50 and 100 nodes, 12.6% off a line; per-layer
    # 5,677, 11,067 and 21,856)
    options = {"precision": "q15", "out_of_domain": "clamp", "scales": "layer"}
    medians = {}
    for m, bundle in ten_input_bundles.items():
        counts = _median_counts(bundle, "cortex-m0", **options)
        medians[m] = float(np.median(counts))
        if m == 100:  # the 10-input, 100-node q15 Cortex-M0 build of the issue
            again = _median_counts(bundle, "cortex-m0", **options)
            assert np.all(np.abs(again - counts) <= 0.01 * counts)
            assert 5_000 < medians[m] < 60_000
    nodes = np.array(sorted(medians), dtype=float)
    counts = np.array([medians[m] for m in sorted(medians)])
    slope, intercept = np.polyfit(nodes, counts, 1)
    assert slope > 0
    assert np.max(np.abs(slope * nodes + intercept - counts) / counts) < 0.01


def test_parse_counts_refuses_broken_or_wrapped_output():
    good = "calibrate 3\n0 323 17\n2 3\nend\n"
    assert ic.parse_counts(good, 2).tolist() == [100, 0]
    with pytest.raises(NodecastError, match="broke off"):
        ic.parse_counts("calibrate 3\n0 323 17\n", 2)
    with pytest.raises(NodecastError, match="2\\^24"):
        ic.parse_counts(f"calibrate 3\n0 {0xFFFFFFFF}\nend\n", 1)


@pytest.mark.slow
def test_emit_and_inspect_print_instruction_counts(ten_input_bundles, tmp_path):
    need("gcc", *TOOLS)
    model = tmp_path / "m.ncast"
    save(ten_input_bundles[25], model)
    runner = CliRunner()
    result = runner.invoke(cli, ["emit", str(model), "--to", "c", "--precision", "q15",
                                 "--out-of-domain", "clamp", "-o", str(tmp_path / "c")])
    assert result.exit_code == 0, result.output
    assert "instructions per prediction" in result.output
    assert "cortex-m0" in result.output and "cortex-m4f" in result.output
    result = runner.invoke(cli, ["inspect", str(model), "--cost", "--json"])
    assert result.exit_code == 0, result.output
    import json

    cost = json.loads(result.output)["cost"]
    assert cost["instructions"]["cortex-m4f"]["median"] > 25 * 10
    assert cost["footprint"]["cortex-m0"]["text"] > 0


def test_a_core_that_cannot_be_counted_is_reported_skipped_not_fatal(ten_input_bundles,
                                                                     monkeypatch):
    need(*TOOLS)

    def too_long(files, info, X, core):
        if core == "cortex-m0":
            raise NodecastError("a prediction took more than 2^24 SysTick ticks")
        return np.array([7, 9, 8])

    monkeypatch.setattr(ic, "count_instructions", too_long)
    bundle = ten_input_bundles[25]
    figures = ic.instruction_counts({}, bundle.network, "model", "float32")
    assert "2^24" in figures["cortex-m0"]["skipped"]
    assert figures["cortex-m4f"]["median"] == 8 and figures["cortex-m4f"]["max"] == 9
    assert "skipped" in ic.format_counts(figures)

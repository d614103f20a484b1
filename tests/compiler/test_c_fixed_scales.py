"""Per-node against per-layer fixed-point scales (issue 20), the C entry points and names (issue 15).

Outside references: scikit-learn's diabetes data (Efron, Hastie, Johnstone and Tibshirani 2004,
"Least angle regression", as shipped by sklearn.datasets.load_diabetes); the host C compiler as the
runtime; a synthetic set with one steep region (a tanh step of slope 200, our own). The 5% rule is
the accuracy budget of issue 20 (artifact test RMSE <= 1.05 x the model's test RMSE).
"""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import reference
from nodecast.compiler.bounds import certify
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.passes.quantise import make_plan
from nodecast.compiler.verify.runners import c as c_runner
from tests.compiler.c_support import emit_c, need, run_c


def _steep_data(rows=3000, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(-1.0, 1.0, (rows, 2))
    y = np.tanh(200.0 * (X[:, 0] - 0.3)) + 0.5 * np.sin(2.0 * X[:, 1])
    return X, y + 0.05 * rng.standard_normal(rows)


def _diabetes_data():
    from sklearn.datasets import load_diabetes

    data = load_diabetes()
    return data.data, data.target


def _split_and_train(X, y):
    from sklearn.model_selection import train_test_split

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X_train, X_test, y_train, y_test = train_test_split(X, y, test_size=0.25, random_state=0)
    model = RandomNodeRegressor(random_state=0).fit(X_train, y_train)
    bundle = to_bundle(model, feature_names=[f"x{i}" for i in range(X.shape[1])],
                       target_names=["y"])
    return bundle, X_test, y_test


@pytest.fixture(scope="module")
def steep_model():
    return _split_and_train(*_steep_data())


def _rmse(a, b) -> float:
    return float(np.sqrt(np.mean((np.asarray(a) - np.asarray(b)) ** 2)))


@pytest.mark.slow
@pytest.mark.parametrize("data", ["diabetes", "steep"])
@pytest.mark.parametrize("scales", ["node", "layer"])
def test_q15_artifact_loses_at_most_5_percent_of_the_test_rmse(tmp_path, data, scales):
    need("gcc")
    bundle, X_test, y_test = _split_and_train(*(_diabetes_data() if data == "diabetes"
                                               else _steep_data()))
    model_rmse = _rmse(reference.predict(bundle.network, X_test)[:, 0], y_test)
    emit_c(bundle, tmp_path, precision="q15", out_of_domain="clamp", scales=scales)
    artifact_rmse = _rmse(run_c(tmp_path, X_test)[:, 0], y_test)
    assert artifact_rmse <= 1.05 * model_rmse, (artifact_rmse, model_rmse)


def test_per_node_formats_follow_each_rows_magnitude(steep_model):
    """Each node's weights fill the word (its largest weight above half the range), where the
    per-layer plan leaves most rows in coarse steps because of the steepest one."""
    net = steep_model[0].network
    node, layer = make_plan(net, "q15", scales="node"), make_plan(net, "q15", scales="layer")
    word = 2**15 - 1
    largest = np.array([max(abs(int(v)) for v in row) for row in node.hidden_weights])
    assert np.all(largest > word // 2)
    assert min(node.hidden_frac) == layer.hidden_frac[0] < max(node.hidden_frac)
    weight_error = np.abs(node.real_weights()[0] - node.at).max(axis=1)
    assert np.median(weight_error) < np.median(np.abs(layer.real_weights()[0] - layer.at).max(axis=1))


@pytest.mark.parametrize("precision", ["q15", "q31"])
def test_per_node_bound_is_tighter_and_never_beaten(steep_model, tmp_path, precision):
    """The certified bound with per-node scales is below the per-layer one on the steep model,
    and the artifact's error on fresh points of the domain stays below it."""
    need("gcc")
    bundle, _, _ = steep_model
    net = bundle.network
    bounds = {s: certify(net, "c", precision, scales=s).worst for s in ("node", "layer")}
    assert bounds["node"] < bounds["layer"]
    emit_c(bundle, tmp_path, precision=precision, out_of_domain="clamp")
    rng = np.random.default_rng(4)
    X = net.domain_low + rng.random((4000, net.n_features)) * (net.domain_high - net.domain_low)
    error = np.max(np.abs(run_c(tmp_path, X) - reference.predict(net, X)))
    reference_rounding = certify(net, "reference", "float64").worst
    assert 0 < error <= bounds["node"] + reference_rounding


@pytest.mark.parametrize(("emitted", "edited"), [("node", "layer"), ("layer", "node")])
def test_scales_are_declared_and_an_edited_declaration_is_refused(steep_model, tmp_path, capsys,
                                                                  emitted, edited):
    """verify exits 2 with one line when the header's SCALES does not match what the source
    computes."""
    from nodecast.compiler import save
    from tests.helpers import run_cli

    need("gcc")
    bundle = steep_model[0]
    model = save(bundle, tmp_path / "steep.ncast")
    folder = emit_c(bundle, tmp_path / "c", precision="q15", out_of_domain="clamp", scales=emitted)
    assert c_runner.describe(folder)["scales"] == emitted
    assert run_cli(capsys, "verify", model, folder).status in (0, 1)  # as emitted: judged
    header = folder / "model.h"
    header.write_text(header.read_text().replace(f'MODEL_SCALES "{emitted}"',
                                                 f'MODEL_SCALES "{edited}"'))
    if edited == "layer":  # the per-node tables contradict the declaration
        with pytest.raises(NodecastError, match="declares scales 'layer'.*edited"):
            c_runner.describe(folder)
    # either way verify recomputes the bound of the declared scales, which the header contradicts
    status, _, err = run_cli(capsys, "verify", model, folder)
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert ("declares scales" if edited == "layer" else "certified_bound") in err


def test_verify_recomputes_the_bound_of_the_declared_scales(steep_model, tmp_path):
    from nodecast.compiler.verify.tolerance import certified_tolerance

    need("gcc")
    bundle = steep_model[0]
    for scales in ("node", "layer"):
        artifact = emit_c(bundle, tmp_path / scales, precision="q15", out_of_domain="clamp",
                          scales=scales)
        info = c_runner.describe(artifact)
        tolerance = certified_tolerance(bundle.network, info)
        assert list(tolerance.certified) == list(certify(bundle.network, "c", "q15",
                                                         scales=scales).per_output)


def test_scales_option_is_checked(steep_model, tmp_path):
    bundle = steep_model[0]
    with pytest.raises(NodecastError, match="--scales"):
        emit_c(bundle, tmp_path, precision="float32", scales="node")
    with pytest.raises(NodecastError, match="--scales"):
        emit_c(bundle, tmp_path, precision="q15", out_of_domain="clamp", scales="row")


SCRATCH_MAIN = r"""
#include <stdio.h>
#include "model.h"
int main(void)
{
    REAL x[MODEL_N_INPUTS];
    REAL a[MODEL_N_OUTPUTS];
    REAL b[MODEL_N_OUTPUTS];
    model_scratch scratch;
    int i;
    int row;
    int same = 0;
    for (row = 0; row < 200; ++row) {
        for (i = 0; i < MODEL_N_INPUTS; ++i) {
            x[i] = (REAL)(((row * 7 + i * 13) % 41) - 20) * (REAL)STEP;
        }
        if (model_predict(x, a) == MODEL_OK && model_predict_scratch(x, b, &scratch) == MODEL_OK
            && memcmp(a, b, sizeof a) == 0) {
            ++same;
        }
    }
    printf("%d %d %d\n", same, (int)sizeof(model_scratch), MODEL_SCRATCH_BYTES);
    return 0;
}
"""


@pytest.mark.parametrize(("precision", "real", "step"), [("float32", "float", "0.05"),
                                                         ("q15", "int16_t", "400"),
                                                         ("q31", "int32_t", "20000000")])
def test_the_scratch_entry_point_computes_the_same_bits(steep_model, tmp_path, precision, real,
                                                        step):
    import subprocess

    from tests.compiler.c_support import STRICT

    need("gcc")
    emit_c(steep_model[0], tmp_path, precision=precision, out_of_domain="clamp")
    (tmp_path / "main.c").write_text("#include <string.h>\n" + SCRATCH_MAIN)
    subprocess.run(["gcc", *STRICT, "-O2", f"-DREAL={real}", f"-DSTEP={step}", "model.c",
                    "main.c", "-o", "scratch", "-lm"], cwd=tmp_path, check=True)
    out = subprocess.run(["./scratch"], cwd=tmp_path, capture_output=True, text=True, check=True)
    same, size, stated = (int(v) for v in out.stdout.split())
    assert same == 200
    # the stated stack arrays: the scratch type, and for float one tile of node values beside it
    tile = 0 if precision.startswith("q") else int((tmp_path / "model.h").read_text()
                                                   .split("#define MODEL_TILE ")[1].split()[0])
    assert stated == size + tile * 4


def test_status_codes_are_an_enum_of_the_codes_that_can_occur(steep_model, tmp_path):
    bundle = steep_model[0]
    for precision, policy, codes in [("float32", "pass", ["MODEL_OK = 0", "NAN_INPUT = 1"]),
                                     ("q15", "clamp", ["MODEL_OK = 0"]),
                                     ("q15", "reject", ["MODEL_OK = 0", "OUT_OF_DOMAIN = 2"])]:
        folder = emit_c(bundle, tmp_path / f"{precision}{policy}", precision=precision,
                        out_of_domain=policy)
        header = (folder / "model.h").read_text()
        enum = header[header.index("typedef enum {"): header.index("} model_status;")]
        assert all(code in enum for code in codes)
        assert enum.count(" = ") == len(codes)
        assert "#define MODEL_OK" not in header


def test_per_node_hidden_formats_only_where_they_pay():
    """q15 always takes them; q31 keeps one hidden format when the per-layer weights' rounding
    summed over a node's inputs is below half a step of the Q5.26 argument (their integers are
    then the per-layer plan's, bit for bit)."""
    from sklearn.datasets import make_friedman1

    from nodecast.trainer import RandomNodeRegressor, to_bundle

    X, y = make_friedman1(600, n_features=5, noise=0.1, random_state=1)  # Friedman (1991) #1
    smooth = to_bundle(RandomNodeRegressor(n_nodes=30, random_state=0).fit(X, y)).network
    node, layer = make_plan(smooth, "q31", scales="node"), make_plan(smooth, "q31", scales="layer")
    assert smooth.n_features * 2.0 ** -(layer.hidden_frac[0] + 1) < 2.0**-27
    assert node.hidden_frac == layer.hidden_frac and node.hidden_shift == layer.hidden_shift
    assert all(a == b for a, b in zip(node.hidden_weights.ravel(), layer.hidden_weights.ravel(),
                                      strict=True))
    assert len(set(make_plan(smooth, "q15", scales="node").hidden_frac)) > 1

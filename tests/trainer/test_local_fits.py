"""Local fits of the data-driven generator on degenerate neighbourhoods: the documented steepness
limit, the counts in the bundle and in ``inspect``, the one-thread guard and the wide-data k."""

from __future__ import annotations

import importlib

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.utils import check_random_state

from nodecast.compiler.activations import get_activation
from nodecast.trainer.generators.data_driven import SLOPE_LIMIT, WIDE_NEIGHBORS, default_neighbors
from tests.helpers import workshop_log

# the module itself (the package exports its generate function under the same name)
data_driven = importlib.import_module("nodecast.trainer.generators.data_driven")

LOGISTIC = get_activation("logistic")



def steepest(weights, slope_scale=1.0, activation=LOGISTIC):
    """The longest local slope of a layer, in normalised target per normalised input."""
    return np.max(np.linalg.norm(weights, axis=1)) * activation.slope_at_inflection / slope_scale


def test_discrete_and_duplicated_columns_give_no_node_steeper_than_the_limit():
    from nodecast.trainer import RandomNodeRegressor

    X, y = workshop_log()
    model = RandomNodeRegressor(n_nodes=200, random_state=0).fit(X, y)
    assert steepest(model.hidden_weights_) <= SLOPE_LIMIT * (1 + 1e-12)
    counts = model.diagnostics_
    assert counts["rank_deficient_fits"] + counts["damped_fits"] > 0  # the treatment happened
    assert counts["rank_deficient_fits"] <= 200 and counts["damped_fits"] <= 200


def test_near_duplicates_with_noisy_targets_would_be_steep_without_the_limit():
    # 40 points jittered by 1e-7 around one spot with targets of pure noise: the least-squares
    # slope is about noise / jitter (~1e6); the limit shortens it, and the count says so.
    rng = np.random.default_rng(3)
    U = np.vstack([rng.random((200, 2)), 0.5 + 1e-7 * rng.standard_normal((40, 2))])
    T = np.concatenate([U[:200, :1], 0.5 + 0.1 * rng.standard_normal((40, 1))])
    distances = np.linalg.norm(U[200:, None] - U[None], axis=2)  # from each jittered point
    neighbours = np.sort(np.argsort(distances, axis=1)[:, :10], axis=1)
    slopes, counts = data_driven.local_slopes(U[neighbours], T[neighbours, 0])
    lengths = np.linalg.norm(slopes, axis=1)
    assert counts["capped_slopes"] > 30 and np.all(lengths <= SLOPE_LIMIT * (1 + 1e-12))


@settings(max_examples=40, deadline=None, derandomize=True, database=None)
@given(rows=st.integers(12, 80), features=st.integers(1, 6), levels=st.integers(1, 4),
       jitter=st.sampled_from([0.0, 1e-12, 1e-6, 1e-3]), seed=st.integers(0, 2**16),
       slope_scale=st.sampled_from([0.5, 1.0, 3.0]))
def test_no_data_beats_the_stated_steepness_bound(rows, features, levels, jitter, seed, slope_scale):
    # The bound is a promise (docs/training.md): ||a|| <= slope_scale * SLOPE_LIMIT / g'(z0) for
    # every node, whatever the data; hypothesis searches discrete, tied and jittered inputs.
    rng = np.random.default_rng(seed)
    U = np.round(rng.random((rows, features)) * levels) / max(levels, 1)
    U = U + jitter * rng.standard_normal(U.shape)
    U = (U - U.min(axis=0)) / np.where(np.ptp(U, axis=0) > 0, np.ptp(U, axis=0), 1.0)
    T = rng.random((rows, 2))
    layer = data_driven.generate(U, T, 50, check_random_state(seed), LOGISTIC,
                                 slope_scale=slope_scale)
    assert np.all(np.isfinite(layer.weights)) and np.all(np.isfinite(layer.biases))
    assert steepest(layer.weights, slope_scale) <= SLOPE_LIMIT * (1 + 1e-12)


def test_counts_are_in_the_bundle_and_shown_by_inspect(tmp_path, capsys):
    from nodecast.cli import main
    from nodecast.compiler.bundle import load

    X, y = workshop_log()
    names = ["few", "many", "kind_a", "kind_b", "kind_c", "kind_d", "checked", "gauge"]
    data = tmp_path / "log.csv"
    lines = [",".join(names + ["wear"])]
    lines += [",".join([*(repr(float(v)) for v in row[:6]), "yes" if row[6] else "no",
                        repr(float(row[7])), repr(float(t))]) for row, t in zip(X, y, strict=True)]
    data.write_text("\n".join(lines) + "\n")
    model = tmp_path / "wear.ncast"
    assert main(["train", str(data), "--target", "wear", "-o", str(model)]) in (0, None)
    diagnostics = load(model).metadata["diagnostics"]
    for key in ("rank_deficient_fits", "damped_fits", "capped_slopes"):
        assert isinstance(diagnostics[key], int)
    capsys.readouterr()
    assert main(["inspect", str(model)]) in (0, None)
    shown = capsys.readouterr().out
    assert f"damped fits {diagnostics['damped_fits']}" in shown
    assert f"rank deficient fits {diagnostics['rank_deficient_fits']}" in shown


def test_local_fits_run_on_one_blas_thread(monkeypatch):
    # The solver's guard (nodecast.trainer.solvers.single_blas_thread) must hold around the local
    # SVDs too: record the BLAS thread counts threadpoolctl reports inside every SVD call, with
    # two threads allowed outside.
    from threadpoolctl import threadpool_info, threadpool_limits

    seen = []
    real_svd = np.linalg.svd

    def recording_svd(*args, **kwargs):
        seen.append([pool["num_threads"] for pool in threadpool_info()
                     if pool["user_api"] == "blas"])
        return real_svd(*args, **kwargs)

    monkeypatch.setattr(data_driven.np.linalg, "svd", recording_svd)
    rng = np.random.default_rng(0)
    U = rng.random((300, 4))
    with threadpool_limits(limits=2, user_api="blas"):
        outside = [pool["num_threads"] for pool in threadpool_info() if pool["user_api"] == "blas"]
        data_driven.generate(U, U[:, :1] ** 2, 20, check_random_state(0), LOGISTIC)
    assert seen and all(counts and max(counts) == 1 for counts in seen)
    assert max(outside) == 2  # so the test would fail if the guard were missing


def test_default_neighbours_are_bounded_for_wide_data():
    assert default_neighbors(3) == 10 and default_neighbors(20) == 42
    assert default_neighbors(312) == WIDE_NEIGHBORS
    rng = np.random.default_rng(1)
    U = rng.random((400, 150))
    layer = data_driven.generate(U, U[:, :1], 10, check_random_state(0), LOGISTIC)
    assert layer.diagnostics["neighbors"] == WIDE_NEIGHBORS
    assert layer.diagnostics["underdetermined_fits"] == 10

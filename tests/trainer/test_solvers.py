"""The output-layer solvers against reference least-squares solvers (numpy.linalg.lstsq,
scipy.linalg.lstsq, sklearn.linear_model.Ridge) on ill-conditioned and rank-deficient designs."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from nodecast.trainer import solvers


def _blocks(H, Y, sizes):
    """Consecutive row blocks of the given sizes (the last takes the rest)."""
    bounds = np.cumsum([0, *sizes, H.shape[0]])
    bounds = np.minimum(bounds, H.shape[0])
    return [(H[a:b], Y[a:b]) for a, b in zip(bounds[:-1], bounds[1:], strict=True) if b > a]


def _ill_conditioned(rows=900, cols=40, duplicates=8, seed=0):
    """H with singular values from 1 down to 1e-7 (condition 1e7) plus exact duplicate columns
    (rank-deficient), and a three-column target with noise."""
    rng = np.random.default_rng(seed)
    left, _ = np.linalg.qr(rng.standard_normal((rows, cols)))
    right, _ = np.linalg.qr(rng.standard_normal((cols, cols)))
    base = 0.5 + (left * np.logspace(0, -7, cols)) @ right * 3.0
    H = np.hstack([base, base[:, :duplicates]])
    Y = H[:, :5] @ rng.standard_normal((5, 3)) + 0.1 * rng.standard_normal((rows, 3))
    return H, Y


def _relative(a, b):
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


@pytest.mark.parametrize("sizes", [[900], [60, 120, 240], [45, 45, 90, 180, 360]])
@pytest.mark.slow
def test_minimum_norm_predictions_match_lstsq_on_an_ill_conditioned_rank_deficient_design(sizes):
    # References: numpy.linalg.lstsq and scipy.linalg.lstsq (gelsd) on the full design [1, H],
    # both with numpy's rank rule (singular values below eps * max(N, columns) times the largest
    # are zero), the rule our solver states.
    H, Y = _ill_conditioned()
    beta, bias = solvers.solve(solvers.accumulate(_blocks(H, Y, sizes)), 0.0)
    design = np.column_stack([np.ones(H.shape[0]), H])
    ours = H @ beta + bias
    cond = np.finfo(float).eps * max(design.shape)
    for reference in (np.linalg.lstsq(design, Y, rcond=None)[0],
                      scipy.linalg.lstsq(design, Y, cond=cond, lapack_driver="gelsd")[0]):
        assert _relative(ours, design @ reference) < 1e-8
    assert beta.shape == (48, 3) and bias.shape == (3,)


def test_minimum_norm_splits_the_weight_of_duplicated_nodes_evenly():
    # The Moore-Penrose solution (numpy.linalg.pinv of the centred H) is the one of least norm:
    # two identical columns share their weight equally.
    H, Y = _ill_conditioned(duplicates=8)
    beta, _ = solvers.solve(solvers.accumulate(_blocks(H, Y, [100, 200])), 0.0)
    Hc, Yc = H - H.mean(axis=0), Y - Y.mean(axis=0)
    expected = np.linalg.pinv(Hc, rcond=np.finfo(float).eps * 900) @ Yc
    assert np.allclose(beta[:8], beta[40:], rtol=1e-6, atol=1e-8)
    assert _relative(Hc @ beta, Hc @ expected) < 1e-8


@pytest.mark.parametrize("ridge", [1e-6, 1e-3, 1.0])
def test_ridge_predictions_match_scikit_learn_ridge_on_random_nodes(ridge):
    # Reference: sklearn.linear_model.Ridge(alpha=lambda, fit_intercept=True, solver="svd"), whose
    # objective ||y - X w - c||^2 + alpha ||w||^2 with an unpenalised intercept is ours.
    from sklearn.linear_model import Ridge

    rng = np.random.default_rng(3)
    X = rng.random((700, 4))
    H = 1.0 / (1.0 + np.exp(-(X @ rng.normal(0, 6, (4, 120)) + rng.normal(0, 3, 120))))
    Y = np.column_stack([np.sin(6 * X[:, 0]) + X[:, 1] ** 2, X[:, 2] * X[:, 3]])
    Y += 0.05 * rng.standard_normal(Y.shape)
    beta, bias = solvers.solve(solvers.accumulate(_blocks(H, Y, [250, 250])), ridge)
    reference = Ridge(alpha=ridge, fit_intercept=True, solver="svd").fit(H, Y)
    assert _relative(H @ beta + bias, reference.predict(H)) < 1e-8


def test_every_prefix_of_the_nodes_is_solved_from_one_factor():
    H, Y = _ill_conditioned(duplicates=0)
    factor = solvers.accumulate(_blocks(H, Y, [200, 300]))
    for m in (1, 7, 25):
        for ridge in (0.0, 1e-4):
            beta, bias = solvers.solve(factor, ridge, n_nodes=m)
            alone, alone_bias = solvers.solve(solvers.accumulate([(H[:, :m], Y)]), ridge)
            assert _relative(H[:, :m] @ beta + bias, H[:, :m] @ alone + alone_bias) < 1e-9


@pytest.mark.slow
def test_both_block_updates_are_used_and_agree(monkeypatch):
    # Rows in random order make blocks like the ones before (the Cholesky update is taken); rows of
    # a region held back to the end are unlike anything seen, so the Householder fallback steps in.
    rng = np.random.default_rng(4)
    X = rng.random((3000, 2))
    X = X[np.argsort(X[:, 0] > 0.97, kind="stable")]
    H = 1.0 / (1.0 + np.exp(-(X @ rng.normal(0, 8, (2, 60)) + rng.normal(0, 4, 60))))
    Y = np.sin(5 * X[:, :1]) + 0.01 * rng.standard_normal((3000, 1))
    taken = []
    original = solvers._cholesky_update

    def counting(*args):
        result = original(*args)
        taken.append(result is not None)
        return result

    monkeypatch.setattr(solvers, "_cholesky_update", counting)
    beta, bias = solvers.solve(solvers.accumulate(_blocks(H, Y, [200] * 14)), 0.0)
    assert any(taken) and not all(taken), taken
    design = np.column_stack([np.ones(3000), H])
    reference = np.linalg.lstsq(design, Y, rcond=None)[0]  # numpy's SVD least squares
    assert _relative(H @ beta + bias, design @ reference) < 1e-8


@pytest.mark.slow
def test_factor_equals_the_householder_factor_of_the_whole_design():
    # R^T R = D^T D holds for any QR factor of D (numpy.linalg.qr as the reference).
    H, Y = _ill_conditioned(duplicates=0)
    factor = solvers.accumulate(_blocks(H, Y, [50, 100, 200, 400]))
    design = np.column_stack([np.ones(H.shape[0]), H])
    R = np.linalg.qr(design, mode="r")
    signs = np.sign(np.diag(R)) * np.sign(np.diag(factor.R))
    assert _relative(factor.R, signs[:, None] * R) < 1e-12
    assert factor.n_rows == 900
    assert np.allclose(factor.y_squares, np.sum(Y**2, axis=0), rtol=1e-14)


def test_a_constant_node_gets_no_weight_at_ridge_zero():
    rng = np.random.default_rng(5)
    H = rng.random((300, 6))
    H[:, 2] = 0.75  # collinear with the bias column
    Y = H[:, :1] * 2.0 + rng.standard_normal((300, 1)) * 0.1
    beta, bias = solvers.solve(solvers.accumulate(_blocks(H, Y, [40, 80])), 0.0)
    assert abs(beta[2, 0]) < 1e-8
    design = np.column_stack([np.ones(300), H])
    assert _relative(H @ beta + bias, design @ np.linalg.lstsq(design, Y, rcond=None)[0]) < 1e-10


def test_fewer_rows_than_nodes_gives_the_interpolating_minimum_norm_solution():
    rng = np.random.default_rng(6)
    H, Y = rng.random((12, 30)), rng.random((12, 1))
    beta, bias = solvers.solve(solvers.accumulate(_blocks(H, Y, [5])), 0.0)
    assert np.allclose(H @ beta + bias, Y, atol=1e-10)


def test_bad_ridge_and_no_rows_are_refused():
    H, Y = np.random.default_rng(7).random((20, 3)), np.ones(20)
    factor = solvers.accumulate([(H, Y)])
    for ridge in (-1e-3, float("nan"), float("inf")):
        with pytest.raises(ValueError, match="ridge"):
            solvers.solve(factor, ridge)
    with pytest.raises(ValueError, match="no rows"):
        solvers.accumulate([(H[:0], Y[:0])])


def test_peak_memory_does_not_grow_with_the_rows():
    # Blocks made on the fly: the factor's memory depends on M, not on the number of rows.
    import tracemalloc

    def peak(n_blocks):
        rng = np.random.default_rng(8)
        blocks = ((rng.random((2000, 150)), rng.random((2000, 1))) for _ in range(n_blocks))
        tracemalloc.start()
        solvers.accumulate(blocks)
        _, top = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        return top

    small, large = peak(3), peak(12)
    assert large < 1.1 * small


def test_update_limit_test_decides_by_the_two_norm_where_gershgorin_cannot():
    # ||W||_2 is the largest singular value (numpy.linalg.norm(ord=2), LAPACK's SVD): a W with
    # ||W||^2 just below the limit but a Gershgorin bound far above it is accepted, just above it
    # refused
    rng = np.random.default_rng(4)
    W = rng.standard_normal((300, 200))
    W /= np.linalg.norm(W, 2)
    for share, expected in ((0.97, True), (1.03, False)):
        scaled = W * np.sqrt(share * solvers.UPDATE_LIMIT)
        gram = scaled.T @ scaled
        assert np.max(np.sum(np.abs(gram), axis=1)) > 3 * solvers.UPDATE_LIMIT  # Gershgorin
        assert solvers._below_limit(gram.copy()) is expected
    assert not solvers._below_limit(np.full((3, 3), np.nan))


def test_blocks_accepted_by_the_two_norm_test_give_the_householder_factor(monkeypatch):
    # logistic nodes of 5 inputs (strongly correlated columns, as in a fit): the second and third
    # blocks' Gershgorin bounds exceed the limit while ||W||^2 does not; the accumulated factor
    # equals one Householder QR of all rows (scipy.linalg.qr), up to the signs of its rows
    rng = np.random.default_rng(5)
    X, A = rng.random((4000, 5)), 3 * rng.standard_normal((5, 300))
    H = 1 / (1 + np.exp(-(X @ A + rng.standard_normal(300))))
    Y = rng.random((4000, 1))
    decided = []
    test = solvers._below_limit
    monkeypatch.setattr(solvers, "_below_limit", lambda gram: decided.append(test(gram)) or decided[-1])
    factor = solvers.accumulate(_blocks(H, Y, [1000, 1000, 1000]))
    assert decided == [True, True]
    R = scipy.linalg.qr(np.column_stack([np.ones(4000), H]), mode="r")[0][:301]
    assert _relative(np.abs(factor.R), np.abs(R)) < 1e-12  # measured 4e-15

"""Every prefix of the nodes from one factorisation per ridge value, against independent solves."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.trainer import solvers
from nodecast.trainer.prefix_solve import prefix_solutions


def _factor(H, Y):
    return solvers.accumulate([(H[:70], Y[:70]), (H[70:], Y[70:])])


@pytest.fixture(scope="module")
def design():
    rng = np.random.default_rng(5)
    H = np.tanh(rng.standard_normal((160, 60)) * 2.0)
    Y = rng.standard_normal((160, 2))
    return H, Y


@pytest.mark.parametrize("ridge", [1e-8, 1e-4, 0.3])
def test_ridge_prefixes_match_the_direct_ridge_problem(design, ridge):
    # Reference: the ridge normal equations of the centred problem solved by scipy.linalg.solve
    # (fine here: the design is small and well conditioned), bias from the means (common practice:
    # an unpenalised intercept is the centred fit's offset).
    import scipy.linalg

    H, Y = design
    solutions = prefix_solutions(_factor(H, Y), ridge, [5, 30, 60])
    for m, (beta, bias) in zip([5, 30, 60], solutions, strict=True):
        Hc, Yc = H[:, :m] - H[:, :m].mean(axis=0), Y - Y.mean(axis=0)
        expected = scipy.linalg.solve(Hc.T @ Hc + ridge * np.eye(m), Hc.T @ Yc, assume_a="pos")
        assert np.allclose(beta, expected, rtol=1e-7, atol=1e-9)
        assert np.allclose(bias, Y.mean(axis=0) - H[:, :m].mean(axis=0) @ expected, atol=1e-9)


@pytest.mark.parametrize("ridge", [0.0, 1e-6])
def test_prefixes_agree_with_the_solver_for_each_prefix(design, ridge):
    H, Y = design
    factor = _factor(H, Y)
    for m, (beta, bias) in zip([1, 17, 60], prefix_solutions(factor, ridge, [1, 17, 60]),
                               strict=True):
        ref_beta, ref_bias = solvers.solve(factor, ridge, n_nodes=m)
        assert np.allclose(beta, ref_beta, rtol=1e-10, atol=1e-12)
        assert np.allclose(bias, ref_bias, rtol=1e-10, atol=1e-12)


def test_ridge_zero_is_the_minimum_norm_solution_when_columns_repeat():
    # Duplicated nodes make H rank-deficient; the honest lambda = 0 answer is the Moore-Penrose
    # solution (numpy.linalg.pinv as the reference), not a blown-up triangular solve.
    rng = np.random.default_rng(2)
    base = np.tanh(rng.standard_normal((120, 12)))
    H = np.hstack([base, base[:, :6]])
    Y = rng.standard_normal((120, 1))
    ((beta, bias),) = prefix_solutions(_factor(H, Y), 0.0, [18])
    Hc, Yc = H - H.mean(axis=0), Y - Y.mean(axis=0)
    expected = np.linalg.pinv(Hc) @ Yc
    assert np.allclose(beta, expected, atol=1e-9)
    assert np.allclose(bias, Y.mean(axis=0) - H.mean(axis=0) @ expected, atol=1e-9)

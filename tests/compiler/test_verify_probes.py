"""Probe families: where they lie, how many there are, and that a seed fixes them."""

from __future__ import annotations

import numpy as np
import pytest

from nodecast.compiler import domain_points
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.compiler.verify import probes


def _net(n_features: int, low=None, high=None) -> Network:
    rng = np.random.default_rng(n_features)
    low = np.arange(n_features, dtype=float) - 3.0 if low is None else np.asarray(low, float)
    high = low + 2.0 + np.arange(n_features) if high is None else np.asarray(high, float)
    span = np.where(high > low, high - low, 1.0)
    return Network(
        hidden_weights=rng.normal(size=(6, n_features)), hidden_biases=rng.normal(size=6),
        activation="logistic", output_weights=rng.normal(size=(6, 1)), output_bias=[0.1],
        input_offset=low, input_scale=span, output_offset=[0.0], output_scale=[1.0],
        domain_low=low, domain_high=high, feature_names=[f"x{i}" for i in range(n_features)],
        target_names=["y"])


def _inside(net, X):
    return np.all((X >= net.domain_low) & (X <= net.domain_high), axis=1)


def test_sobol_family_is_scipys_scrambled_sequence_on_the_box():
    from scipy.stats import qmc  # SciPy's Sobol generator is the reference for the family

    net = _net(3)
    X = probes.sobol(net, 1000, seed=7)
    unit = qmc.Sobol(d=3, scramble=True, seed=7).random_base2(10)[:1000]
    assert X.shape == (1000, 3)
    np.testing.assert_allclose(X, net.domain_low + unit * (net.domain_high - net.domain_low))
    assert _inside(net, X).all()
    # quasi-random points cover the box evenly: discrepancy far below a random sample's (SciPy)
    random_unit = np.random.default_rng(7).random((1000, 3))
    assert qmc.discrepancy(unit) < 0.5 * qmc.discrepancy(random_unit)


def test_all_corners_up_to_ten_features_and_a_sample_beyond():
    four = probes.corners(_net(4), seed=0)
    assert four.shape == (16, 4) and len({tuple(row) for row in four}) == 16
    net10 = _net(10)
    assert len({tuple(row) for row in probes.corners(net10, 0)}) == 2**10
    net12 = _net(12)
    sample = probes.corners(net12, seed=3)
    assert sample.shape == (domain_points.MAX_CORNERS, 12)
    on_a_bound = (sample == net12.domain_low) | (sample == net12.domain_high)
    assert on_a_bound.all()
    assert not np.array_equal(sample, probes.corners(net12, seed=4))


def test_near_bounds_rows_sit_on_and_just_inside_each_bound():
    net = _net(3)
    X = probes.near_bounds(net, seed=0)
    assert X.shape == (4 * 3, 3) and _inside(net, X).all()
    span = net.domain_high - net.domain_low
    for i in range(3):
        low_rows, high_rows = X[4 * i : 4 * i + 2, i], X[4 * i + 2 : 4 * i + 4, i]
        steps = [0.0, probes.INSIDE_STEP * span[i]]
        np.testing.assert_allclose(low_rows - net.domain_low[i], steps, atol=1e-12)
        np.testing.assert_allclose(net.domain_high[i] - high_rows, steps, atol=1e-12)


def test_outside_rows_are_all_outside_including_far_ones():
    net = _net(3)
    X = probes.outside(net, seed=0)
    assert X.shape == (4 * 3 + 2, 3)
    assert not _inside(net, X).any()
    span = net.domain_high - net.domain_low
    assert np.max((X - net.domain_high) / span) >= 10.0 - 1e-12  # 10 spans beyond, overflow check


def test_families_are_seeded_and_the_data_is_split_by_the_domain():
    net = _net(2, low=[0.0, 0.0], high=[1.0, 1.0])
    data = np.array([[0.5, 0.5], [1.5, 0.2], [0.0, 1.0]])
    first = probes.probe_families(net, data, count=64, seed=5)
    again = probes.probe_families(net, data, count=64, seed=5)
    other = probes.probe_families(net, data, count=64, seed=6)
    names = [f.name for f in first]
    assert names == ["data", "data-outside", "sobol", "corners", "near-bounds", "outside"]
    assert all(np.array_equal(a.X, b.X) for a, b in zip(first, again, strict=True))
    assert not np.array_equal(first[2].X, other[2].X)
    assert first[0].X.tolist() == [[0.5, 0.5], [0.0, 1.0]] and first[1].X.tolist() == [[1.5, 0.2]]
    assert [f.inside_domain for f in first] == [True, False, True, True, True, False]


def test_zero_width_feature_still_gives_outside_probes():
    net = _net(2, low=[0.0, 5.0], high=[1.0, 5.0])
    assert not _inside(net, probes.outside(net, 0)).any()
    assert _inside(net, probes.sobol(net, 16, 0)).all()


@pytest.mark.parametrize("data, needle", [
    (np.array([[0.1, np.nan]]), "row 1"),
    (np.array([[0.1, 0.2, 0.3]]), "2 columns"),
])
def test_bad_probe_data_is_a_clear_error(data, needle):
    with pytest.raises(NodecastError, match=needle):
        probes.probe_families(_net(2), data)

"""Probe sets for verification, in named families, all drawn deterministically from a seed."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.ir import Network

MAX_CORNERS = 1024


@dataclass(frozen=True, eq=False)
class ProbeFamily:
    name: str
    X: np.ndarray
    inside_domain: bool


def sobol(net: Network, count: int, seed: int) -> np.ndarray:
    from scipy.stats import qmc

    unit = qmc.Sobol(d=net.n_features, scramble=True, seed=seed).random(count)
    return net.domain_low + unit * (net.domain_high - net.domain_low)


def corners(net: Network, seed: int) -> np.ndarray:
    n = net.n_features
    if 2**n <= MAX_CORNERS:
        bits = np.array(np.meshgrid(*[[0, 1]] * n, indexing="ij")).reshape(n, -1).T
    else:
        bits = np.random.default_rng(seed).integers(0, 2, size=(MAX_CORNERS, n))
    return np.where(bits == 1, net.domain_high, net.domain_low)


def near_bounds(net: Network, seed: int) -> np.ndarray:
    """For each feature and each bound, a point at a random place whose feature sits just inside."""
    rng = np.random.default_rng(seed)
    span = net.domain_high - net.domain_low
    rows = []
    for i in range(net.n_features):
        for bound, step in ((net.domain_low[i], 1e-9), (net.domain_high[i], -1e-9)):
            row = net.domain_low + rng.random(net.n_features) * span
            row[i] = bound + step * span[i]
            rows.append(row)
    return np.clip(np.array(rows), net.domain_low, net.domain_high)


def outside(net: Network, seed: int) -> np.ndarray:
    """Points with one feature beyond a bound by 10% and 10x of the span."""
    rng = np.random.default_rng(seed)
    span = np.where(net.domain_high > net.domain_low, net.domain_high - net.domain_low, 1.0)
    rows = []
    for i in range(net.n_features):
        for factor in (-10.0, -0.1, 0.1, 10.0):
            row = net.domain_low + rng.random(net.n_features) * span
            row[i] = (net.domain_low[i] if factor < 0 else net.domain_high[i]) + factor * span[i]
            rows.append(row)
    return np.array(rows)


def probe_families(net: Network, data: np.ndarray | None = None, count: int = 4096,
                   seed: int = 0) -> list[ProbeFamily]:
    families = []
    if data is not None and len(data):
        inside = ~np.any((data < net.domain_low) | (data > net.domain_high), axis=1)
        families.append(ProbeFamily("data", data[inside], True))
        if (~inside).any():
            families.append(ProbeFamily("data-outside", data[~inside], False))
    families += [
        ProbeFamily("sobol", sobol(net, count, seed), True),
        ProbeFamily("corners", corners(net, seed), True),
        ProbeFamily("near-bounds", near_bounds(net, seed), True),
        ProbeFamily("outside", outside(net, seed), False),
    ]
    return [family for family in families if len(family.X)]

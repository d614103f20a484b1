"""Probe sets for verification: named families of input rows, drawn deterministically from a seed.

Families, in this order (empty ones are left out):

``data``
    The rows of the user's data (``--data``) that lie in the declared domain.
``data-outside``
    The user's rows that do not; they are judged by the out-of-domain policy.
``sobol``
    ``count`` points of a scrambled Sobol sequence (scipy.stats.qmc) spread through the domain box.
``corners``
    Every corner of the box for n <= 10 features; beyond, a seeded sample of ``MAX_CORNERS``.
``near-bounds``
    For every feature and each of its two bounds, one row with that feature exactly on the bound and
    one just inside it (``INSIDE_STEP`` of the span), the other features at random in the box.
``outside``
    For every feature, rows with that feature beyond a bound by 10% and by 10 times the span, plus
    one row with every feature 10% below and one 10% above the box. They check the policy: clamp
    must equal the reference on the clamped input, pass the reference itself, reject must reject.
``unknown-level``
    Networks with categorical inputs only: for each categorical input, 8 in-domain rows where it
    names no level (code -1), judged by the policy like ``outside``.

With categorical inputs every generated row also carries a level code per categorical input,
cycling through every level (``domain_points.with_levels``; each family starts at another level), so
every level meets the Sobol points, the corners and the bounds.

Each family draws from its own stream ``numpy.random.default_rng([seed, k])``, so adding a family
never changes the others, and the same seed always gives the same probes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nodecast.compiler.domain_points import corners, sobol, with_levels
from nodecast.compiler.errors import NodecastError
from nodecast.compiler.ir import Network
from nodecast.compiler.reference import outside_domain

INSIDE_STEP = 1e-6
OUTSIDE_FACTORS = (-10.0, -0.1, 0.1, 10.0)


@dataclass(frozen=True, eq=False)
class ProbeFamily:
    """A named set of probes: ``X`` of shape (n_rows, n_features); ``inside_domain`` tells whether
    every row lies in the declared domain (the in-domain families set the output range)."""

    name: str
    X: np.ndarray
    inside_domain: bool


def _span(net: Network) -> np.ndarray:
    return net.domain_high - net.domain_low


def _random_rows(net: Network, rng: np.random.Generator, count: int) -> np.ndarray:
    return net.domain_low + rng.random((count, net.n_features)) * _span(net)



def near_bounds(net: Network, seed: int) -> np.ndarray:
    """4 n rows: each feature on each bound, and INSIDE_STEP of its span inside it."""
    rng = np.random.default_rng([seed, 2])
    span = _span(net)
    rows = []
    for i in range(net.n_features):
        for bound, direction in ((net.domain_low[i], 1.0), (net.domain_high[i], -1.0)):
            for step in (0.0, INSIDE_STEP):
                row = _random_rows(net, rng, 1)[0]
                row[i] = bound + direction * step * span[i]
                rows.append(row)
    return np.clip(np.array(rows), net.domain_low, net.domain_high)


def outside(net: Network, seed: int) -> np.ndarray:
    """4 n + 2 rows outside the box (a zero-width feature counts its span as 1)."""
    rng = np.random.default_rng([seed, 3])
    span = np.where(_span(net) > 0, _span(net), 1.0)
    rows = []
    for i in range(net.n_features):
        for factor in OUTSIDE_FACTORS:
            row = _random_rows(net, rng, 1)[0]
            row[i] = (net.domain_low[i] if factor < 0 else net.domain_high[i]) + factor * span[i]
            rows.append(row)
    rows += [net.domain_low - 0.1 * span, net.domain_high + 0.1 * span]
    return np.array(rows)


def unknown_levels(net: Network, seed: int) -> np.ndarray:
    """8 rows per categorical input with that input's code -1 (no level), the rest in the domain."""
    rows = []
    for c in range(net.n_categorical):
        block = with_levels(net, _random_rows(net, np.random.default_rng([seed, 4, c]), 8), c)
        block[:, net.n_features + c] = -1.0
        rows.append(block)
    return np.vstack(rows) if rows else np.empty((0, net.n_inputs))


def data_rows(net: Network, data) -> np.ndarray:
    """``data`` as finite float64 rows of n_inputs columns, or a NodecastError."""
    X = np.asarray(data, dtype=np.float64)
    if X.ndim != 2 or X.shape[1] != net.n_inputs:
        levels = f" then the level codes of {', '.join(net.categorical_names)}" if \
            net.n_categorical else ""
        raise NodecastError(f"probe data must have {net.n_inputs} columns (the features "
                            f"{', '.join(net.feature_names)}{levels}), got an array of shape "
                            f"{X.shape}")
    bad = np.flatnonzero(~np.all(np.isfinite(X), axis=1))
    if bad.size:
        raise NodecastError(f"probe data row {bad[0] + 1} holds a non-finite value; "
                            "verification data must be finite numbers")
    return X


def probe_families(net: Network, data=None, count: int = 4096, seed: int = 0) -> list[ProbeFamily]:
    """The probe families of the module doc, in order; ``data`` of shape (n_rows, n_features)."""
    if count < 1:
        raise NodecastError(f"the probe count must be at least 1, got {count!r}")
    families = []
    if data is not None and len(data):
        X = data_rows(net, data)
        inside = ~outside_domain(net, X)
        families += [ProbeFamily("data", X[inside], True),
                     ProbeFamily("data-outside", X[~inside], False)]
    families += [
        ProbeFamily("sobol", with_levels(net, sobol(net, count, seed)), True),
        ProbeFamily("corners", with_levels(net, corners(net, seed), 1), True),
        ProbeFamily("near-bounds", with_levels(net, near_bounds(net, seed), 2), True),
        ProbeFamily("outside", with_levels(net, outside(net, seed), 3), False),
        ProbeFamily("unknown-level", unknown_levels(net, seed), False),
    ]
    return [family for family in families if len(family.X)]

"""Scrambled Sobol' points without importing ``scipy.stats`` (whose import alone costs about 0.6 s
of CPU, most of ``nodecast emit``'s start-up).

The same sequence as ``scipy.stats.qmc.Sobol(d, scramble=True, seed=seed).random(n)`` (checked
point for point in tests/compiler/test_sobol.py against the installed SciPy): direction numbers of
Joe and Kuo (2008), read from the table SciPy ships (``scipy/stats/_sobol_direction_numbers.npz``,
found without importing ``scipy.stats``); linear matrix scrambling plus a digital shift (Owen-type
LMS+shift, as in SciPy), both drawn from ``numpy.random.default_rng(seed)``; points in Gray-code
order with the first point (the shift itself) first; 30 bits.
"""

from __future__ import annotations

import functools
import importlib.util
from pathlib import Path

import numpy as np

BITS = 30


@functools.lru_cache(maxsize=1)
def _direction_table() -> tuple[np.ndarray, np.ndarray]:
    spec = importlib.util.find_spec("scipy.stats")  # imports scipy, not scipy.stats
    if spec is None or not spec.submodule_search_locations:
        raise ImportError("SciPy's Sobol' direction numbers are not installed")
    path = Path(spec.submodule_search_locations[0]) / "_sobol_direction_numbers.npz"
    with np.load(path) as table:
        return table["poly"].astype(np.int64), table["vinit"].astype(np.int64)


def _directions(d: int) -> np.ndarray:
    """Direction numbers v[dim, bit] as integers of BITS bits (the bit order of SciPy's table)."""
    poly, vinit = _direction_table()
    if d > poly.shape[0]:
        raise ValueError(f"at most {poly.shape[0]} dimensions, got {d}")
    v = np.zeros((d, BITS), dtype=np.int64)
    v[0, :] = 1
    for dim in range(1, d):
        p = int(poly[dim])
        m = p.bit_length() - 1
        v[dim, :m] = vinit[dim, :m]
        for j in range(m, BITS):
            new = int(v[dim, j - m])
            pow2 = 1
            for k in range(m):
                pow2 <<= 1
                if (p >> (m - 1 - k)) & 1:
                    new ^= pow2 * int(v[dim, j - k - 1])
            v[dim, j] = new
    return v * (2 ** np.arange(BITS - 1, -1, -1, dtype=np.int64))


def _scramble(v: np.ndarray, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """(shift, scrambled direction numbers): LMS with lower-triangular random bit matrices."""
    d = v.shape[0]
    shift = rng.integers(2, size=(d, BITS), dtype=np.uint32).astype(np.int64) @ \
        (2 ** np.arange(BITS, dtype=np.int64))
    ltm = np.tril(rng.integers(2, size=(d, BITS, BITS), dtype=np.uint32)).astype(np.int64)
    ltm[:, np.arange(BITS), np.arange(BITS)] = 1
    # each row p of a matrix as an integer, its entry k weighing 2^(BITS - 1 - k)
    rows = ltm @ (2 ** np.arange(BITS - 1, -1, -1, dtype=np.int64))  # (d, BITS)
    scrambled = np.zeros_like(v)
    for p in range(BITS - 1, -1, -1):
        weight = 1 << (BITS - 1 - p)
        parity = _parity(rows[:, p, None] & v)
        scrambled += parity * weight
    return shift, scrambled


def _parity(x: np.ndarray) -> np.ndarray:
    x = x.copy()
    for s in (32, 16, 8, 4, 2, 1):
        x ^= x >> s
    return x & 1


def sobol(d: int, n: int, seed: int) -> np.ndarray:
    """The first ``n`` points (shape (n, d), in [0, 1)) of the scrambled sequence for ``seed``."""
    if n > 2**BITS:
        raise ValueError(f"at most 2^{BITS} points")
    rng = np.random.default_rng(seed)
    shift, v = _scramble(_directions(d), rng)
    gray = np.arange(n, dtype=np.int64)
    gray ^= gray >> 1  # point i is the shift XOR the direction numbers of the bits of gray(i)
    quasi = np.broadcast_to(shift, (n, d)).copy()
    for bit in range(max(int(n - 1).bit_length(), 0)):
        quasi ^= ((gray >> bit) & 1)[:, None] * v[:, bit][None, :]
    return quasi / 2.0**BITS

"""Held-out rows chosen by a hash of the global row index (or of the row's values): the same rows
whether the data sits in memory, is read chunk by chunk, or lies in partitions on a cluster, and
no O(N) permutation.

Each row index i is mixed with a key drawn from the seed by the SplitMix64 finaliser (Steele, Lea
and Flood 2014, "Fast splittable pseudorandom number generators"; its constants as published),
and the row is held out when the 64-bit result, read as a fraction of 2^64, is below the fraction.
The held-out count is therefore about fraction * N (binomial), not exactly it.
"""

from __future__ import annotations

import numpy as np

_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MIX1 = np.uint64(0xBF58476D1CE4E5B9)
_MIX2 = np.uint64(0x94D049BB133111EB)


def _mix(values: np.ndarray) -> np.ndarray:
    z = values.copy()
    z ^= z >> np.uint64(30)
    z *= _MIX1
    z ^= z >> np.uint64(27)
    z *= _MIX2
    z ^= z >> np.uint64(31)
    return z


def held_out(first_index: int, n_rows: int, fraction: float, seed: int) -> np.ndarray:
    """Boolean mask of shape (n_rows,): which of the rows first_index .. + n_rows - 1 are held out."""
    if fraction <= 0:
        return np.zeros(n_rows, dtype=bool)
    key = np.uint64(np.random.RandomState(seed % 2**32).randint(2**62, dtype=np.int64))
    with np.errstate(over="ignore"):
        index = np.arange(first_index, first_index + n_rows, dtype=np.uint64)
        hashed = _mix((index + key) * _GOLDEN)
    threshold = np.uint64(min(int(fraction * 2.0**64), 2**64 - 1))
    return hashed < threshold


def below(hashed: np.ndarray, fraction: float) -> np.ndarray:
    """Which 64-bit hashes, read as fractions of 2^64, fall below ``fraction``."""
    return hashed < np.uint64(min(int(fraction * 2.0**64), 2**64 - 1))


def content_hash(values: np.ndarray, key: int) -> np.ndarray:
    """A 64-bit hash of each row of ``values`` (rows, n) float64 under ``key``: the row's numbers'
    bit patterns (-0.0 read as 0.0, so equal rows hash alike) folded in one by one through the
    SplitMix64 finaliser. Shape (rows,) of uint64."""
    words = np.ascontiguousarray(np.asarray(values, dtype=np.float64) + 0.0).view(np.uint64)
    hashed = np.full(words.shape[0], np.uint64(key), dtype=np.uint64)
    with np.errstate(over="ignore"):
        for column in words.T:
            hashed = _mix((hashed ^ column) * _GOLDEN)
    return hashed

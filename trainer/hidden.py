"""The hidden layer evaluated in row blocks, fast and bit for bit like the reference.

Each block is one matrix product into a reused buffer, a bias added in place and the activation's
in-place kernel (:mod:`nodecast.compiler.activations`), whose power-of-two input scale is folded
into the weights: no temporaries, no pass over the block that the arithmetic does not need. The
running minimum and maximum of every node's pre-activation over the rows can be kept on the way,
for the node diagnostics that ``inspect`` shows.

All the matrix products of a fit go through SciPy's BLAS, the library of the solver's triangular
solves: numpy may load a second OpenBLAS, and two threaded BLAS pools that take turns fight over
the cores (measured: the fit ran several times slower).
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
from scipy.linalg import blas

BLOCK_ENTRIES = 2**22  # about 32 MB of float64 per hidden block


def block_rows(n_nodes: int) -> int:
    """Rows per block: about ``BLOCK_ENTRIES`` activations, and at least twice the factor's order
    so that the per-block O(M^3) work of the solver stays a small share."""
    return max(2 * (n_nodes + 1), BLOCK_ENTRIES // (n_nodes + 1))


def block_bounds(n_rows: int, n_nodes: int, growing: bool = True) -> list[tuple[int, int]]:
    """(start, stop) of consecutive row blocks of :func:`block_rows` rows; ``growing``: the first
    of twice the factor's order and each next one twice as long up to that. (The solver factors
    the first block by Householder QR and later ones by its cheaper update, which wants blocks not
    much longer than the rows before them.)"""
    limit = block_rows(n_nodes)
    bounds, start, size = [], 0, min(2 * (n_nodes + 1), limit) if growing else limit
    while start < n_rows:
        stop = min(start + size, n_rows)
        bounds.append((start, stop))
        start, size = stop, min(2 * size, limit)
    return bounds


class PreactivationRange:
    """Running per-node minimum and maximum of the pre-activations z over the rows seen.

    ``low`` and ``high`` are ndarrays of shape (n_nodes,), +inf and -inf before any row.
    """

    def __init__(self, n_nodes: int) -> None:
        self.low = np.full(n_nodes, np.inf)
        self.high = np.full(n_nodes, -np.inf)

    def update(self, Z: np.ndarray, scale: float) -> None:
        """Take in a block of scaled pre-activations ``scale * z`` of shape (rows, n_nodes)."""
        np.minimum(self.low, np.fmin.reduce(Z, axis=0) / scale, out=self.low)
        np.maximum(self.high, np.fmax.reduce(Z, axis=0) / scale, out=self.high)


def design_blocks(U: np.ndarray, weights: np.ndarray, biases: np.ndarray, activation,
                  bounds, ranges: PreactivationRange | None = None) -> Iterator[np.ndarray]:
    """Designs [1, g(U A^T + b)] of the row blocks ``U[start:stop]``, (start, stop) in ``bounds``.

    U : ndarray of shape (N, n), normalised inputs; weights : ndarray of shape (M, n);
    biases : ndarray of shape (M,); activation : an :class:`Activation`.
    Yields ndarrays of shape (stop - start, M + 1): a column of ones, then the activations. They
    share one buffer (a block is valid until the next one is requested, and its user may overwrite
    it).
    """
    make = DesignMaker(weights, biases, activation, ranges)
    for start, stop in bounds:
        yield make(U[start:stop])


class DesignMaker:
    """Designs [1, g(U A^T + b)] of blocks of rows U (rows, n), written into one reused buffer
    (a design is valid until the next call), the pre-activation ranges kept on the way. The ones
    column rides along through the product and the kernel, and is set afterwards, so that every
    pass runs over one contiguous array."""

    def __init__(self, weights: np.ndarray, biases: np.ndarray, activation,
                 ranges: PreactivationRange | None = None) -> None:
        scale, (m, n) = activation.kernel_scale, weights.shape
        self.folded_weights = np.zeros((m + 1, n), order="F")
        self.folded_weights[1:] = weights * scale
        self.folded_biases = np.concatenate([[0.0], biases * scale])
        self.activation, self.ranges, self.scale = activation, ranges, scale
        self.buffer = np.empty((0, m + 1))

    def __call__(self, U: np.ndarray) -> np.ndarray:
        if self.buffer.shape[0] < U.shape[0]:
            self.buffer = np.empty((U.shape[0], self.buffer.shape[1]))
        design = self.buffer[: U.shape[0]]
        # design^T = folded_weights @ U^T, written in place (F order is design's C order)
        blas.dgemm(1.0, self.folded_weights, U.T, 0.0, design.T, overwrite_c=1)
        design += self.folded_biases
        if self.ranges is not None:
            self.ranges.update(design[:, 1:], self.scale)
        self.activation.kernel(design)
        design[:, 0] = 1.0
        return design

"""How much memory a fit needs, estimated before any large array exists, and how much there is."""

from __future__ import annotations

import os

from nodecast.trainer.hidden import block_rows
from nodecast.trainer.ridge_choice import CHECK_FRACTION, CHECK_ROWS

_FLOAT = 8  # bytes of a float64


def fit_memory_bytes(n_rows: int, n_features: int, n_nodes: int, n_outputs: int,
                     check_fraction: float = CHECK_FRACTION) -> int:
    """Peak bytes of one fit, beyond the caller's own copy of the data.

    Counted: the normalised inputs and targets and the neighbour search's copy of the inputs
    (3 N n + N t), a hidden block and its design copy (2 r (M + 1), r rows per block), the stacked
    matrix of a Householder step (r + M + 1 rows of M + 1 + t), about eight (M + 1)^2 matrices of
    the factor, its update, the held-out check's factor and the final solve, the copy of the
    inputs hashed to find the check rows (N n), and three arrays of the check rows' hidden outputs
    (c (M + 1), c = min(f N, 20,000) rows for the check fraction f; see
    :mod:`nodecast.trainer.ridge_choice`).
    """
    p = n_nodes + 1
    rows = min(block_rows(n_nodes), max(n_rows, 1))
    check = min(int(check_fraction * n_rows), CHECK_ROWS)
    data = 4 * n_rows * n_features + n_rows * n_outputs
    blocks = 2 * rows * p + (rows + p) * (p + n_outputs) + 3 * check * p
    return _FLOAT * (data + blocks + 8 * p * p)


def available_memory_bytes() -> int | None:
    """Physical memory not in use now (POSIX sysconf), or None where the system does not say."""
    try:
        pages, size = os.sysconf("SC_AVPHYS_PAGES"), os.sysconf("SC_PAGE_SIZE")
    except (AttributeError, ValueError, OSError):
        return None
    return pages * size if pages > 0 and size > 0 else None


def check_fits_in_memory(n_rows: int, n_features: int, n_nodes: int, n_outputs: int,
                         check_fraction: float = CHECK_FRACTION) -> None:
    """Raise ValueError, with the estimate, when a fit would not fit into the available memory."""
    need = fit_memory_bytes(n_rows, n_features, n_nodes, n_outputs, check_fraction)
    have = available_memory_bytes()
    if have is not None and need > have:
        raise ValueError(f"{n_nodes} nodes need about {need / 2**30:.3g} GiB of memory to fit "
                         f"{n_rows} rows, more than the {have / 2**30:.3g} GiB available; "
                         "use fewer nodes")

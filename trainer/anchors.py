"""Anchor rows drawn by global row index, in memory proportional to the nodes, not the rows.

A draw is a forward Fisher-Yates shuffle of the row indices 0 .. N-1 that stops after the rows it
needs: step i swaps position i with a position j drawn uniformly from [i, N) and takes what lands
at i (Knuth, TAOCP vol. 2, Algorithm P, run front to back). Only swapped positions are stored (a
dict), so a draw of M anchors from N rows costs O(M) time and memory whatever N is; the data need
not be in memory, only its number of rows. Step i's draw depends on i and N only, so the draw of M
anchors is the prefix of the draw of more with the same seed (what model selection relies on), and
it does not depend on how the rows are split into chunks or partitions. More anchors than rows
take further rounds, each a fresh shuffle of all rows.
"""

from __future__ import annotations

import numpy as np


def draw_anchors(n_rows: int, n_nodes: int, rng: np.random.RandomState) -> np.ndarray:
    """Row indices, ndarray of shape (n_nodes,) of int64: distinct while n_nodes <= n_rows."""
    if n_rows < 1:
        raise ValueError("cannot draw anchors from no rows")
    anchors = np.empty(n_nodes, dtype=np.int64)
    done = 0
    while done < n_nodes:
        count = min(n_rows, n_nodes - done)
        picks = rng.randint(np.arange(count, dtype=np.int64), n_rows, dtype=np.int64)
        moved: dict[int, int] = {}
        for i, j in enumerate(picks.tolist()):
            anchors[done + i] = moved.get(j, j)
            moved[j] = moved.get(i, i)
        done += count
    return anchors

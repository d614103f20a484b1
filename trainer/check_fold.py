"""The output layer's factor folded from blocks of rows, with the default ridge's held-out check
rows set apart and folded last: one piece of arithmetic for a fit in memory, chunk by chunk and on
cluster partitions, so that all three give the same factor."""

from __future__ import annotations

import numpy as np

from nodecast.trainer import ridge_choice, solvers


def fold_blocks(blocks, make_design, checked=None):
    """(factor, check) from (U block, T block) pairs in row order: the solver's factor of the
    designs [1, H] (``make_design``, a :class:`~nodecast.trainer.hidden.DesignMaker`) of all rows
    and, for the ``checked`` rows (a :class:`~nodecast.trainer.ridge_choice.CheckRows`, or None),
    the held-out check's data. The check rows are folded in after all the others, whatever the
    ridge, so that giving the ridge "auto" chose reproduces the model bit for bit."""
    rest, design, targets = fold_outside_check(blocks, make_design, checked)
    if rest is None:
        raise ValueError("no rows to fit outside the held-out check rows")
    if checked is None:
        return rest, None
    check = ridge_choice.HeldOut(rest, design, targets)
    return solvers.accumulate_designs([(design, targets)], start=rest), check


def fold_outside_check(blocks, make_design, checked=None):
    """(factor of the rows outside the check set or None where there are none, the check rows'
    designs, their targets) from (U block, T block) pairs in row order. Within a block the rows
    outside the check set come first, in row order, so that they are a view of the design, not a
    copy. The blocks may come from memory, from chunks regrouped into the same blocks, or from
    one partition."""
    held, held_targets = [], []

    def designs():
        for U, T in blocks:
            rest = U.shape[0]
            if checked is not None:
                rows = checked.mask(U)
                rest -= int(np.count_nonzero(rows))
                if rest < U.shape[0]:
                    order = np.concatenate([np.flatnonzero(~rows), np.flatnonzero(rows)])
                    U, T = U[order], T[order]
            D = make_design(U)
            held.append(D[rest:].copy())
            held_targets.append(T[rest:])
            yield D[:rest], T[:rest]

    try:
        factor = solvers.accumulate_designs(designs())
    except ValueError:  # no rows outside the check set
        factor = None
    width = make_design.buffer.shape[1]
    design = np.concatenate(held) if held else np.empty((0, width))
    targets = np.concatenate(held_targets) if held_targets else None
    return factor, design, targets

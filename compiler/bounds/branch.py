"""Branch and bound over the input box: the largest per-box bound, refined where it is largest.

A per-box bound is valid for every point of its box and never grows when the box shrinks, so the
maximum over a set of boxes that cover the domain is a certified bound, and splitting the boxes
that attain it can only lower it. Each round splits the boxes within ``CRITICAL`` of the current
maximum (for any output) in two, across the input along which the pre-activations vary most; the
search stops after ``budget`` box evaluations or when the maximum is within ``CRITICAL`` of the
bound at the critical boxes' centres (splitting could not gain more). The budget is a count, never
a time, so the stated bound is the same on every machine.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

CRITICAL = 0.02


@dataclass(frozen=True)
class Refined:
    """``bound`` (t,): the certified maximum; ``boxes``: how many boxes were evaluated."""

    bound: np.ndarray
    boxes: int


def refine(bound: Callable[[np.ndarray, np.ndarray], np.ndarray], low: np.ndarray,
           high: np.ndarray, impact: np.ndarray, budget: int, threshold=None) -> Refined:
    """Certified max over [low, high] of the per-box ``bound(lows, highs) -> (B, t)``.

    ``impact`` (n,) weighs each input's width when choosing where to split (for example the sum
    of |weights| of that input over the nodes). With ``threshold`` (t,), the aim is only to prove
    the maximum below it: boxes already below are left alone, and the search stops once all are.
    """
    lows, highs = low[None, :].copy(), high[None, :].copy()
    values = bound(lows, highs)
    evaluated = 1
    while evaluated + 2 <= budget:
        top = values.max(axis=0)
        if threshold is None:
            critical = np.any(values >= (1.0 - CRITICAL) * top, axis=1)
        else:
            critical = np.any(values > threshold, axis=1)
        chosen = np.flatnonzero(critical)[: (budget - evaluated) // 3]
        if chosen.size == 0:
            break
        centres = 0.5 * (lows[chosen] + highs[chosen])
        at_centres = bound(centres, centres).max(axis=0)
        evaluated += chosen.size
        if np.all(top <= (1.0 + CRITICAL) * at_centres) and threshold is None:
            break
        widths = (highs[chosen] - lows[chosen]) * impact
        axis = np.argmax(widths, axis=1)
        if np.all(widths[np.arange(chosen.size), axis] <= 0):
            break
        rows = np.arange(chosen.size)
        middle = centres[rows, axis]
        left_high, right_low = highs[chosen].copy(), lows[chosen].copy()
        left_high[rows, axis], right_low[rows, axis] = middle, middle
        child_lows = np.vstack([lows[chosen], right_low])
        child_highs = np.vstack([left_high, highs[chosen]])
        parent = np.vstack([values[chosen], values[chosen]])
        child_values = np.minimum(bound(child_lows, child_highs), parent)
        evaluated += child_lows.shape[0]
        keep = np.ones(lows.shape[0], dtype=bool)
        keep[chosen] = False
        lows = np.vstack([lows[keep], child_lows])
        highs = np.vstack([highs[keep], child_highs])
        values = np.vstack([values[keep], child_values])
    return Refined(values.max(axis=0), evaluated)

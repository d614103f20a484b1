"""Search a box for the largest value of a non-negative function of the inputs (``nodecast diff``).

A private, small version of the adversarial search of the certified-bound work (to be replaced by
``nodecast.compiler.bounds.search`` once that exists on main): seeded uniform points, the box's
corners and centre, and any given points are evaluated; the best ``keep`` distinct ones start a
projected gradient ascent (central differences, an adaptive step per start) in coordinates scaled
to the box. The result is a value the function really takes at a point inside the box, so it is a
lower bound of the true maximum, never an over-statement.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MAX_CORNER_INPUTS = 12  # all 2^n corners up to this many inputs; a random sample of corners beyond


@dataclass(frozen=True)
class Found:
    """The largest value found, where, and how many points the search evaluated."""

    value: float
    point: np.ndarray
    evaluations: int


def _corners(n: int, rng: np.random.Generator, limit: int = 4096) -> np.ndarray:
    if n <= MAX_CORNER_INPUTS:
        return ((np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1).astype(np.float64)
    return rng.integers(0, 2, size=(limit, n)).astype(np.float64)


def _starts(values: np.ndarray, points: np.ndarray, keep: int) -> np.ndarray:
    """The ``keep`` best points, skipping repeats (rounded to 1e-9 of the box)."""
    order = np.argsort(-values, kind="stable")
    chosen, seen = [], set()
    for index in order:
        key = tuple(np.round(points[index], 9))
        if key not in seen:
            seen.add(key)
            chosen.append(index)
        if len(chosen) == keep:
            break
    return points[np.array(chosen, dtype=int)]


def _gradient(fn_unit, U: np.ndarray, h: float) -> np.ndarray:
    m, n = U.shape
    plus = np.repeat(U, n, axis=0) + h * np.tile(np.eye(n), (m, 1))
    minus = np.repeat(U, n, axis=0) - h * np.tile(np.eye(n), (m, 1))
    up, down = fn_unit(np.clip(plus, 0, 1)), fn_unit(np.clip(minus, 0, 1))
    return ((up - down) / (2 * h)).reshape(m, n)


def _ascend(fn_unit, U: np.ndarray, steps: int) -> tuple[np.ndarray, np.ndarray, int]:
    """Projected gradient ascent from each row of ``U`` (unit-box coordinates)."""
    m, n = U.shape
    value, evaluations = fn_unit(U), m
    step = np.full(m, 0.05)
    for _ in range(steps):
        active = step > 1e-10
        if not active.any():
            break
        grad = _gradient(fn_unit, U[active], 1e-6)
        evaluations += 2 * n * int(active.sum())
        norm = np.linalg.norm(grad, axis=1)
        direction = np.divide(grad, norm[:, None], out=np.zeros_like(grad), where=norm[:, None] > 0)
        trial = np.clip(U[active] + step[active, None] * direction, 0, 1)
        trial_value = fn_unit(trial)
        evaluations += trial.shape[0]
        better = trial_value > value[active]
        index = np.flatnonzero(active)
        U[index[better]], value[index[better]] = trial[better], trial_value[better]
        step[index] = np.where(better, step[index] * 1.5, step[index] * 0.25)
        step[index[norm == 0]] = 0.0
    return U, value, evaluations


def find_largest(fn, low, high, *, seed: int = 0, samples: int = 4096, keep: int = 16,
                 steps: int = 80, extra=None) -> Found:
    """The largest value of ``fn`` (rows of shape (m, n) -> (m,) values) found in [low, high].

    ``extra``: further points (rows) to try as starts; those outside the box are left out.
    """
    low, high = np.asarray(low, dtype=np.float64), np.asarray(high, dtype=np.float64)
    width = high - low
    rng = np.random.default_rng(seed)

    def fn_unit(U: np.ndarray) -> np.ndarray:
        return np.asarray(fn(low + U * width), dtype=np.float64)

    n = low.size
    candidates = [rng.random((samples, n)), _corners(n, rng), np.full((1, n), 0.5)]
    if extra is not None and len(extra):
        E = np.asarray(extra, dtype=np.float64)
        inside = np.all((E >= low) & (E <= high), axis=1)
        candidates.append(np.divide(E[inside] - low, width, out=np.zeros_like(E[inside]),
                                    where=width > 0))
    U = np.vstack(candidates)
    values = fn_unit(U)
    starts = _starts(values, U, keep)
    U_end, v_end, evaluations = _ascend(fn_unit, starts.copy(), steps)
    best = int(np.argmax(v_end))  # the ascent starts at the best sample and only accepts gains
    return Found(float(v_end[best]), low + U_end[best] * width, U.shape[0] + evaluations)

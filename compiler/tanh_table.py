"""The entries of every linear-interpolation tanh table the C artifacts hold (fixed point in
:mod:`nodecast.compiler.fixedpoint`, float in :mod:`nodecast.compiler.backends.c_float`), before
each rounds them to its format. Their proven error is
:func:`nodecast.compiler.bounds.activations.table_errors`."""

from __future__ import annotations

import numpy as np


def offset_tanh(size: int, step: float) -> np.ndarray:
    """tanh(k step) + step^2 |tanh''(k step)| / 12, k = 0 .. size: the entries of every tanh table
    before rounding; the offset makes the interpolation error zero-mean (see
    :func:`nodecast.compiler.fixedpoint.tanh_table`)."""
    th = np.tanh(np.arange(size + 1) * step)
    return th + step**2 / 12.0 * 2.0 * th * (1.0 - th * th)

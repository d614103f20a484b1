"""Categorical levels as text: one spelling rule shared by the trainer, the CLI and every artifact.

A level is text. Numbers read as levels are spelled canonically, so that a CSV cell ``2``, ``2.0``
or a pandas value ``2.0`` all name level "2": integral values without a fraction, others as Python's
shortest round-trip ``repr``. A cell that matches no level exactly is tried once more in that
spelling when it reads as a number; otherwise it is an unknown level (code -1), which the artifact's
out-of-domain policy handles (see ir.py).
"""

from __future__ import annotations

import math

import numpy as np

UNKNOWN = -1


def level_text(value) -> str:
    """The canonical text of a level value (bool, number or text)."""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        number = float(value)
        if math.isfinite(number) and number.is_integer() and abs(number) < 2**53:
            return str(int(number))
        return repr(number)
    return str(value).strip()


def numeric_text(text: str) -> str | None:
    """The canonical spelling of ``text`` when it reads as a finite number, else None."""
    try:
        number = float(text)
    except ValueError:
        return None
    return level_text(number) if math.isfinite(number) else None


def ordered_levels(cells) -> tuple[str, ...]:
    """The distinct levels of a column of cells in their fixed order: by value when every cell
    reads as a number (so that hours 0..23 get codes 0..23), else by text (code point order)."""
    cells = [str(cell).strip() for cell in cells]
    numbers = [numeric_text(cell) for cell in cells]
    if all(number is not None for number in numbers):
        return tuple(sorted(set(numbers), key=float))
    return tuple(sorted(set(cells)))


def level_code(text: str, levels) -> int:
    """The code of ``text`` among ``levels`` (a sequence, or a dict text -> code), or UNKNOWN."""
    lookup = levels if isinstance(levels, dict) else {level: k for k, level in enumerate(levels)}
    text = str(text).strip()
    if text in lookup:
        return lookup[text]
    number = numeric_text(text)
    return lookup.get(number, UNKNOWN) if number is not None else UNKNOWN


def codes(cells, levels) -> np.ndarray:
    """Level codes (float64, UNKNOWN for an unknown level) of a column of cells."""
    lookup = {level: k for k, level in enumerate(levels)}
    return np.array([level_code(cell, lookup) for cell in cells], dtype=np.float64)


def table_rows(table, net, allow_nonfinite: bool = False) -> np.ndarray:
    """Rows of a CSV table for ``net``: its numeric features by header name, then the level code of
    each categorical input (read as text)."""
    X = table.numbers(net.feature_names, allow_nonfinite=allow_nonfinite)
    if not net.n_categorical:
        return X
    columns = [codes(table.texts(name), group)
               for name, group in zip(net.categorical_names, net.categorical_levels, strict=True)]
    return np.column_stack([X, *columns])

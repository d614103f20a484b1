"""Scikit-learn's make_friedman1 data (Friedman 1991) as a small sensor log for the select tests:
five readings (one coarse), a target and a high/low grade, with thirty copies of one row."""

from __future__ import annotations

import numpy as np

FEATURES = ("a", "b", "c", "d", "e")


def friedman_log(rows: int = 1200):
    """(X of shape (rows, 5), y, grade labels)."""
    from sklearn.datasets import make_friedman1  # Friedman (1991) benchmark, shipped by sklearn

    X, y = make_friedman1(n_samples=rows, n_features=5, noise=0.5, random_state=1)
    X[:, 4] = np.round(4 * X[:, 4])  # a coarse reading: ties in the neighbour search
    X[rows // 2: rows // 2 + 30] = X[0]  # thirty copies of row 0 (one fold must hold them all)
    grade = np.where(y > np.median(y), "high", "low")
    return X, y, grade


def write_log(path, X, y, grade):
    lines = [",".join(FEATURES) + ",y,grade"]
    lines += [",".join(map(repr, row)) + f",{t!r},{g}"
              for row, t, g in zip(X.tolist(), y.tolist(), grade, strict=True)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path

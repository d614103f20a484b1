"""The default neighbours k and slope scale s of the data-driven generator (``n_neighbors="auto"``,
``slope_scale="auto"``, what ``nodecast train`` does without ``--neighbors``/``--slope-scale``).

A small inner search by generalized cross-validation (Golub, Heath and Wahba 1979), an estimate
of the leave-one-out error that needs no refits:

* candidates: k in k0 * (1, 2, 4, 8, 16) (at most the rows; k0 = max(10, 2 (q + 1)), q the
  varying features), then s in (0.5, 1, 2) at the best k (coordinate search: 7 draws at most);
  a given k or s is not searched;
* each candidate draws its layer exactly as a plain fit with those settings and the same random
  state would, reads the rows once into the QR factor of [1, H], and is scored by the estimator's
  ``rate``: the GCV estimate at the ridge that fit would use (the given one, or the automatic
  rule's choice with its held-out check and float32 export guard,
  :mod:`nodecast.trainer.ridge_choice`), so that candidates are ranked as the models they would
  ship (scored at the GCV minimum instead, a candidate whose best ridge the float32 guard refuses
  can win and ship with a larger ridge: measured on Friedman #1, test RMSE 1.050 where the
  ranking by the shipped ridge gives 1.018);
* the winner's layer and factor are the model's: nothing is refitted, and ``train`` with the
  chosen ``--neighbors`` and ``--slope-scale`` and the same seed gives the same arrays.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from nodecast.trainer import ridge_choice
from nodecast.trainer.generators.data_driven import default_neighbors

NEIGHBOR_FACTORS = (1, 2, 4, 8, 16)
SLOPE_SCALES = (0.5, 1.0, 2.0)


@dataclass(frozen=True, eq=False)
class LayerFit:
    """One hidden layer read into the output layer's factor: the layer, the factor of [1, H], each
    node's pre-activation range, the held-out check's data (None: no check) and, where the ridge is
    automatic, the rule's (ridge, record) for this factor (None where the ridge is given)."""

    layer: object
    factor: object
    ranges: object
    check: object
    ridge_rule: tuple | None = None


def gcv_rmse(factor, ridge: float) -> float:
    """sqrt of the GCV score per output (normalised units) at ``ridge``."""
    spec = ridge_choice.spectrum(factor)
    return float(np.sqrt(ridge_choice.gcv_score(spec, float(ridge)) / spec.rotated.shape[1]))


def neighbor_candidates(n_varying: int, n_rows: int) -> list[int]:
    k0 = default_neighbors(n_varying)
    return sorted({min(k0 * f, n_rows) for f in NEIGHBOR_FACTORS})


def choose(fit_layer: Callable, n_neighbors, slope_scale, rate: Callable, n_varying: int,
           n_rows: int):
    """The best (k, s) candidate's fit, and a record of the search for the bundle's metadata.

    fit_layer(n_neighbors, slope_scale) -> a :class:`LayerFit`, one draw and one pass over the
    rows; rate(that fit) -> the candidate's normalised RMSE estimate (lower is better);
    ``n_neighbors``/``slope_scale`` "auto" are searched, other values used as given.
    Returns (the best LayerFit, k, s, record).
    """
    tried: dict[tuple, float] = {}
    best: list = []  # [rank key, (k, s), fitted]: only the best fit is kept, to bound memory

    def score(k, s):
        if (k, s) not in tried:
            fitted = fit_layer(k, s)
            tried[(k, s)] = float(rate(fitted))
            key = (tried[(k, s)], abs(np.log(s)), k)
            if not best or key < best[0]:
                best[:] = [key, (k, s), fitted]
        return tried[(k, s)]

    ks = neighbor_candidates(n_varying, n_rows) if n_neighbors == "auto" else [n_neighbors]
    scales = SLOPE_SCALES if slope_scale == "auto" else (float(slope_scale),)
    first_s = 1.0 if slope_scale == "auto" else float(slope_scale)
    k = min(ks, key=lambda c: (score(c, first_s), c))
    for c in scales:
        score(k, c)
    k, s = best[1]
    record = {"rule": "gcv", "neighbors": k, "slope_scale": s,
              "candidates": [{"neighbors": ck, "slope_scale": cs, "gcv_rmse_normalised": value}
                             for (ck, cs), value in sorted(tried.items(), key=_order)]}
    return best[2], k, s, record


def _order(item) -> tuple:
    (k, s), _ = item
    return (-1 if k is None else k, s)

"""Compare hidden-node generators on one data set (``nodecast compare``).

Every contender is a generator with its own grid (the fixed interval u = 1 is a contender with a
one-value grid); each is tuned by the same k-fold cross-validation as ``select``
(:func:`nodecast.trainer.selection.run_search`: one draw and one factorisation per fold and grid
layer serve every node count and ridge value), on the same folds, nodes and ridge values. The
contenders are ranked by the CV error of their best grid point; each best point is then refitted
on all rows, to report what one fit of it costs.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from nodecast.compiler.errors import NodecastError
from nodecast.trainer.folds import input_box
from nodecast.trainer.grid import GridPoint, make_grid, ranked
from nodecast.trainer.method_grid import LayerSpec, layer_grid
from nodecast.trainer.selection import SearchSettings, run_search

CONTENDERS = ("data-driven", "fixed-interval", "interval", "domain-anchored", "slope-angle",
              "weight-sum")
FIXED_INTERVAL = 1.0  # the customary default u of the fixed-interval baseline


@dataclass(frozen=True)
class Contender:
    """A row of the comparison: its name and the hidden layers its search draws."""

    name: str
    layers: tuple[LayerSpec, ...]


def contenders(names, values: dict) -> list[Contender]:
    """Contenders by name (``CONTENDERS``), each generator on its grid from ``values`` (parameter ->
    list, None for the generator's default; see :func:`nodecast.trainer.method_grid.layer_grid`).
    "fixed-interval" is the interval generator with u = 1 only; its u is not a grid option."""
    methods = [("interval" if name == "fixed-interval" else name) for name in names]
    searched = [name for name in names if name != "fixed-interval"]
    if searched:
        layer_grid(searched, values)  # validates names and values once, for every contender
    elif any(given is not None for given in values.values()):
        raise NodecastError("fixed-interval takes no grid options (u = 1); add the contender "
                            "'interval' to search u")
    rows = []
    for name, method in zip(names, methods, strict=True):
        if name == "fixed-interval":
            rows.append(Contender(name, (LayerSpec("interval", (("interval", FIXED_INTERVAL),)),)))
        else:
            mine = {axis: given for axis, given in values.items()
                    if given is not None and _owns(method, axis)}
            rows.append(Contender(name, layer_grid([method], mine)))
    return rows


def _owns(method: str, param: str) -> bool:
    from nodecast.trainer.method_grid import AXES

    return any(axis.param == param for axis in AXES[method])


@dataclass(eq=False)
class ContenderResult:
    """One contender's search: every grid point, the best one, its curve and its costs."""

    contender: Contender
    points: list[GridPoint]
    chosen: GridPoint
    search_seconds: float
    refit_seconds: float
    diagnostics: dict = field(default_factory=dict)

    def at_grid_end(self) -> list[str]:
        """The chosen point's settings that sit at either end of a grid axis of three or more
        values (the best may lie beyond the grid)."""
        chosen = self.chosen.layer.kwargs
        ends = []
        for param, value in chosen.items():
            values = sorted({layer.kwargs[param] for layer in self.contender.layers} - {None})
            if len(values) >= 3 and value in (values[0], values[-1]):
                ends.append(param)
        return ends

    def curve(self) -> list[dict]:
        """The best point at each node count: CV RMSE mean and spread (first target's order)."""
        best: dict[int, GridPoint] = {}
        for p in self.points:
            if p.nodes not in best or p.rank_key() < best[p.nodes].rank_key():
                best[p.nodes] = p
        return [{"nodes": m, "rmse_mean": list(p.rmse_mean), "rmse_std": list(p.rmse_std),
                 "score": p.score} for m, p in sorted(best.items())]

    def as_dict(self, rank: int) -> dict:
        return {"rank": rank, "name": self.contender.name,
                "layers": [layer.as_dict() for layer in self.contender.layers],
                "chosen": self.chosen.as_dict(), "at_grid_end": self.at_grid_end(),
                "curve": self.curve(),
                "points": [p.as_dict() for p in self.points], "diagnostics": self.diagnostics,
                "seconds": {"search": self.search_seconds, "refit": self.refit_seconds}}


@dataclass(eq=False)
class ComparisonResult:
    """Contender results, best first, and the shared settings."""

    results: list[ContenderResult]
    settings: SearchSettings
    nodes: tuple[int, ...]
    ridges: tuple[float, ...]

    def as_dict(self) -> dict:
        s = self.settings
        return {"folds": s.folds, "seed": s.seed, "activation": s.activation,
                "nodes": list(self.nodes), "ridges": list(self.ridges),
                "ranking": [r.contender.name for r in self.results],
                "contenders": [r.as_dict(rank) for rank, r in enumerate(self.results, 1)]}


def compare(X, Y, rows: list[Contender], nodes, ridges, settings: SearchSettings, declared,
            progress=None) -> ComparisonResult:
    """Tune every contender by k-fold CV on the same folds and rank them by their best CV error.

    X : ndarray (N, n); Y : ndarray (N, t); declared : (low, high), NaN where not declared;
    progress : callable(name, done, total) or None.
    """
    from nodecast.trainer.estimators import RandomNodeRegressor

    results = []
    for row in rows:
        grid = make_grid(nodes, ridges, row.layers)
        step = None if progress is None else (lambda d, t, name=row.name: progress(name, d, t))
        start = time.perf_counter()
        points, diagnostics = run_search(X, Y, grid, settings, declared, step)
        searched = time.perf_counter() - start
        chosen = ranked(points)[0]
        start = time.perf_counter()
        RandomNodeRegressor(activation=settings.activation, domain=input_box(X, *declared),
                            random_state=settings.seed, **chosen.params).fit(X, Y)
        refit = time.perf_counter() - start
        results.append(ContenderResult(row, points, chosen, searched, refit, diagnostics))
    order = sorted(range(len(results)), key=lambda i: (results[i].chosen.score, i))
    grid = make_grid(nodes, ridges, rows[0].layers)
    return ComparisonResult([results[i] for i in order], settings, grid.nodes, grid.ridges)


def format_table(result: ComparisonResult) -> str:
    """The comparison as a text table, best first."""
    header = ("rank", "method", f"{result.settings.folds}-fold CV RMSE", "nodes", "chosen settings",
              "search s", "refit s")
    lines = [header]
    for rank, r in enumerate(result.results, 1):
        p = r.chosen
        rmse = ", ".join(f"{m:.4g} +/- {s:.2g}" for m, s in zip(p.rmse_mean, p.rmse_std, strict=True))
        settings = " ".join(p.layer.describe().split()[1:] + [f"ridge={p.ridge:g}"])
        settings += " *" if r.at_grid_end() else ""
        lines.append((str(rank), r.contender.name, rmse, str(p.nodes), settings,
                      f"{r.search_seconds:.2f}", f"{r.refit_seconds:.2f}"))
    widths = [max(len(line[i]) for line in lines) for i in range(len(header))]
    text = "\n".join("  ".join(cell.ljust(w) for cell, w in zip(line, widths, strict=True)).rstrip()
                     for line in lines)
    if any(r.at_grid_end() for r in result.results):
        text += ("\n* a chosen setting is at the end of its grid; the best may lie beyond it: "
                 "extend that grid option")
    return text

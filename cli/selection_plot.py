"""``--plot``: the cross-validated error against M, one line per data-driven k and per other
generator, the chosen point marked.

Each line shows, for one neighbour count k (or one other generator), the best mean CV RMSE over the
other settings and ridge values at every M (among the points within the precision budget, when
there is one), with the spread over folds as a band; a second panel shows the growth curve when
there is one. matplotlib is an optional extra (``pip install 'nodecast[plot]'``).
"""

from __future__ import annotations

import io

from nodecast.compiler.errors import NodecastError


def _pyplot():
    try:
        import matplotlib
    except ImportError:
        raise NodecastError("--plot needs matplotlib: pip install 'nodecast[plot]'") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def line_label(point) -> str:
    """The line a point belongs to: one per data-driven k, one per other generator."""
    if point.method == "data-driven":
        return f"data-driven, k = {point.neighbors if point.neighbors else 'default'}"
    return point.method


def best_per_k(points) -> dict:
    """For each line (:func:`line_label`): list of (M, mean RMSE, std RMSE) of the best remaining
    settings and lambda at that M among the points within the precision budget, first target."""
    best: dict = {}
    for p in (p for p in points if p.meets_budget):
        key = (p.method, p.neighbors or 0, line_label(p), p.nodes)
        if key not in best or p.rank_key() < best[key].rank_key():
            best[key] = p
    lines: dict = {}
    for key, p in sorted(best.items(), key=lambda item: item[0]):
        lines.setdefault(key[2], []).append((p.nodes, p.rmse_mean[0], p.rmse_std[0]))
    return lines


def edge_hints(result) -> list[str]:
    """One hint per grid axis (of more than one value) whose chosen value is the largest tried, or
    the smallest (ridge 0 excepted): the best value may lie beyond the grid."""
    chosen, grid, hints = result.chosen, result.grid, []
    same = [layer.kwargs for layer in grid.layers if layer.method == chosen.method]
    neighbors = sorted({s["n_neighbors"] for s in same if s.get("n_neighbors") is not None})
    slopes = sorted({s["slope_scale"] for s in same if s.get("slope_scale") is not None})
    axes = [("M", "--nodes", chosen.nodes, grid.nodes),
            ("k", "--neighbors", chosen.neighbors, neighbors),
            ("s", "--slope-scales", chosen.slope_scale, slopes),
            ("lambda", "--ridge", chosen.ridge, grid.ridges)]
    for name, option, value, tried in axes:
        if value is None or len(set(tried)) < 2:
            continue
        if value == max(tried):
            hints.append(f"the chosen {name} = {value:g} is the largest tried; try larger values "
                         f"in {option}")
        elif value == min(tried) and not (name == "lambda" and value == 0):
            hints.append(f"the chosen {name} = {value:g} is the smallest tried; try smaller values "
                         f"in {option}")
    return hints


def _with_actual_k(label: str, n_features: int | None) -> str:
    """A line's legend: the actual k where the line is the data-driven default."""
    if label.endswith("k = default"):
        return label[: -len("k = default")] + neighbours_label(None, n_features)
    return label


def neighbours_label(k, n_features: int | None) -> str:
    """The legend text of a k line: the actual k, also for the default."""
    if k is not None:
        return f"k = {k}"
    from nodecast.trainer.generators.data_driven import default_neighbors

    return f"k = {default_neighbors(n_features)} (default)" if n_features else "k = default"


def plot_search(result, path, overwrite: bool = False, target: str = "", unit: str = "",
                n_features: int | None = None) -> None:
    """Write the PNG of ``result`` (a SelectionResult) to ``path``; ``target`` and ``unit`` name
    the first target in the labels, ``n_features`` gives the default k its number."""
    from nodecast.compiler.files import write_atomic

    plt = _pyplot()
    figure = search_figure(plt, result, target, unit, n_features)
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=100, metadata={"Software": None})
    plt.close(figure)
    write_atomic(path, buffer.getvalue(), overwrite=overwrite)


def search_figure(plt, result, target: str = "", unit: str = "", n_features: int | None = None):
    """The matplotlib figure of :func:`plot_search` (open; the caller closes it)."""
    panels = 2 if result.growth is not None else 1
    figure, axes = plt.subplots(1, panels, figsize=(6.4 * panels, 4.4), squeeze=False)
    _grid_panel(axes[0][0], result, target, unit, n_features)
    if result.growth is not None:
        _growth_panel(axes[0][1], result.growth)
    hints = edge_hints(result)
    if hints:
        axes[0][0].text(0.01, 0.01, "hint: " + "\n".join(hints), transform=axes[0][0].transAxes,
                        fontsize=7, color="tab:red", va="bottom")
    figure.tight_layout()
    return figure


def _grid_panel(ax, result, target: str, unit: str, n_features) -> None:
    for label, line in best_per_k(result.points).items():
        m, mean, std = (list(column) for column in zip(*line, strict=True))
        ax.plot(m, mean, marker="o", label=_with_actual_k(label, n_features))
        ax.fill_between(m, [a - b for a, b in zip(mean, std, strict=True)],
                        [a + b for a, b in zip(mean, std, strict=True)], alpha=0.15)
    chosen = result.chosen
    ax.plot([chosen.nodes], [chosen.rmse_mean[0]], marker="*", markersize=16, color="black",
            linestyle="none", label=f"chosen: {chosen.describe()}")
    ax.set_xscale("log")
    ax.set_xticks(list(result.grid.nodes), [str(m) for m in result.grid.nodes])
    ax.minorticks_off()
    ax.set_xlabel("hidden nodes M")
    ax.set_ylabel(f"{result.settings.folds}-fold CV RMSE of {target or 'the target'}"
                  + (f" [{unit}]" if unit else ""))
    within = " within the budget" if result.settings.tolerance is not None else ""
    ax.set_title(f"{target + ': ' if target else ''}validation error against M "
                 f"(best other settings and ridge{within})", fontsize=10)
    ax.legend(fontsize=7)
    ax.grid(True, alpha=0.3)


def _growth_panel(ax, growth) -> None:
    nodes = [r["nodes"] for r in growth.curve]
    rmse = [r["rmse_mean"][0] for r in growth.curve]
    kept = [r["kept"] for r in growth.curve]
    ax.plot([n for n, k in zip(nodes, kept, strict=True) if k],
            [e for e, k in zip(rmse, kept, strict=True) if k], marker="o", label="kept batch")
    ax.plot([n for n, k in zip(nodes, kept, strict=True) if not k],
            [e for e, k in zip(rmse, kept, strict=True) if not k], marker="x", linestyle="none",
            color="red", label="rejected batch")
    ax.set_xlabel("hidden nodes after the batch")
    ax.set_ylabel("CV RMSE (first target)")
    ax.set_title(f"growth: batches of {growth.settings.batch} nodes")
    ax.legend(fontsize=7)
    ax.grid(True, alpha=0.3)

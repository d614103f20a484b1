"""``compare --plot``: the cross-validated error against the node count, one line per contender
(its best settings and ridge at each count, first target), the fold spread as a band."""

from __future__ import annotations

import io


def plot_comparison(result, path) -> None:
    """Write the PNG of ``result`` (a ComparisonResult) to ``path``."""
    from nodecast.cli.selection_plot import _pyplot
    from nodecast.compiler.files import write_atomic

    plt = _pyplot()
    figure, ax = plt.subplots(figsize=(7.0, 4.6))
    for rank, r in enumerate(result.results, 1):
        curve = r.curve()
        m = [c["nodes"] for c in curve]
        mean = [c["rmse_mean"][0] for c in curve]
        std = [c["rmse_std"][0] for c in curve]
        ax.plot(m, mean, marker="o", label=f"{rank}. {r.contender.name}")
        ax.fill_between(m, [a - b for a, b in zip(mean, std, strict=True)],
                        [a + b for a, b in zip(mean, std, strict=True)], alpha=0.12)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xticks(list(result.nodes), [str(m) for m in result.nodes])
    ax.minorticks_off()
    ax.set_xlabel("hidden nodes M")
    ax.set_ylabel(f"{result.settings.folds}-fold CV RMSE (target units)")
    ax.set_title("generators tuned on their own grids: best settings and ridge at each M",
                 fontsize=10)
    ax.legend(fontsize=7)
    ax.grid(True, alpha=0.3, which="both")
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=100, metadata={"Software": None})
    plt.close(figure)
    write_atomic(path, buffer.getvalue(), overwrite=True)

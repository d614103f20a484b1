"""Pictures of a bundle (matplotlib, the optional extra ``plot``): per-node pre-activation ranges over
the declared domain, and predicted against actual values on labelled data."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.inspection import node_ranges

STEEP_Z = {"logistic": 2.2, "tanh": 1.1}  # |z| where g runs from 10% to 90% of its range


def _pyplot():
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise NodecastError("plots need matplotlib: pip install 'nodecast[plot]'") from None
    return plt


NODES_FILE, PREDICTED_FILE = "nodes.png", "predicted_vs_actual.png"


def plot_bundle(bundle, folder: str | Path, table=None, overwrite: bool = False) -> list[Path]:
    """``inspect --plot``: nodes.png, and predicted_vs_actual.png when ``table`` (a csvio Table)
    holds a regression bundle's target columns; every file checked before any is drawn."""
    from nodecast.compiler.files import check_outputs

    net, folder = bundle.network, Path(folder)
    wanted = [folder / NODES_FILE]
    labelled = (table is not None and net.task == "regression"
                and all(name in table.header for name in net.target_names))
    if table is not None and not labelled:
        raise NodecastError("--data for the predicted-against-actual plot needs a regression "
                            f"bundle and the target column(s) {', '.join(map(repr, net.target_names))}"
                            " in the file")
    if labelled:
        wanted.append(folder / PREDICTED_FILE)
    if folder.exists() and not folder.is_dir():
        raise NodecastError(f"{folder} is a file; --plot takes a folder")
    _pyplot()  # refuse before creating the folder when matplotlib is missing
    folder.mkdir(parents=True, exist_ok=True)  # before the check: outputs need their folder
    check_outputs({str(path): path for path in wanted}, None, overwrite)
    written = [plot_node_ranges(bundle, wanted[0], overwrite)]
    if labelled:
        X, y = table.numbers(net.feature_names), table.numbers(net.target_names)
        written.append(plot_predicted_vs_actual(bundle, X, y, wanted[1], overwrite))
    return written


def plot_node_ranges(bundle, path: str | Path, overwrite: bool = True) -> Path:
    """One horizontal bar per node: the range its pre-activation z takes over the declared box.

    The shaded band is the activation's steep part (10% to 90% of its range); a bar that never
    meets the band belongs to a node that is nearly constant over the whole domain (wasted).
    """
    plt = _pyplot()
    net = bundle.network
    ranges = node_ranges(bundle)
    low, high = np.array(ranges["z_low"]), np.array(ranges["z_high"])
    steep = STEEP_Z[net.activation]
    order = np.argsort(0.5 * (low + high))
    wasted = (low[order] > steep) | (high[order] < -steep)
    fig, ax = plt.subplots(figsize=(7, 4.5), dpi=110)
    ax.axvspan(-steep, steep, color="0.88", label="steep part of the activation")
    rows = np.arange(net.n_nodes)
    ax.hlines(rows[~wasted], low[order][~wasted], high[order][~wasted], color="tab:blue", lw=1,
              label="node's z over the domain")
    ax.hlines(rows[wasted], low[order][wasted], high[order][wasted], color="tab:red", lw=1,
              label=f"never steep on the domain ({int(wasted.sum())})")
    limit = max(4 * steep, float(np.percentile(np.abs(np.r_[low, high]), 95)))
    ax.set_xlim(-limit, limit)
    ax.set_xlabel("pre-activation z")
    ax.set_ylabel("hidden node (sorted by the centre of its range)")
    ax.set_title(f"{net.n_nodes} {net.activation} nodes over the declared input domain")
    ax.legend(loc="best", fontsize=8, framealpha=0.9)
    return _save(fig, plt, path, overwrite)


def plot_predicted_vs_actual(bundle, X: np.ndarray, y: np.ndarray, path: str | Path,
                             overwrite: bool = True) -> Path:
    """Scatter of the reference prediction against the actual value, for each regression target."""
    from nodecast.compiler import reference

    plt = _pyplot()
    net = bundle.network
    if net.task != "regression":
        raise NodecastError("predicted-vs-actual plots are for regression bundles")
    predicted = reference.predict(net, X)
    y = np.asarray(y, dtype=float).reshape(predicted.shape)
    fig, axes = plt.subplots(1, net.n_outputs, figsize=(4.5 * net.n_outputs, 4.2), dpi=110,
                             squeeze=False)
    for o, ax in enumerate(axes[0]):
        rmse = float(np.sqrt(np.mean((predicted[:, o] - y[:, o]) ** 2)))
        ax.scatter(y[:, o], predicted[:, o], s=6, alpha=0.6)
        ends = [min(y[:, o].min(), predicted[:, o].min()), max(y[:, o].max(), predicted[:, o].max())]
        ax.plot(ends, ends, color="0.4", lw=1)
        ax.set_xlabel(f"actual {net.target_names[o]}{_unit(net.target_units[o])}")
        ax.set_ylabel(f"predicted{_unit(net.target_units[o])}")
        ax.set_title(f"{net.target_names[o]}: RMSE {rmse:.3g}"
                     + (f" {net.target_units[o]}" if net.target_units[o] else "")
                     + f" on {y.shape[0]} rows")
    return _save(fig, plt, path, overwrite)


def _unit(unit: str) -> str:
    return f" [{unit}]" if unit else ""


def _save(fig, plt, path, overwrite: bool) -> Path:
    import io

    from nodecast.compiler.files import write_atomic

    path, buffer = Path(path), io.BytesIO()
    fig.tight_layout()
    # no timestamp or software tag in the file, so the same bundle gives the same picture
    fig.savefig(buffer, format="png", metadata={"Software": None})
    plt.close(fig)
    write_atomic(path, buffer.getvalue(), overwrite=overwrite)
    return path

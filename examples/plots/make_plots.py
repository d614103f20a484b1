"""Draw nodes.png and predicted_vs_actual.png for a bundle and a labelled CSV.
Usage: python3 make_plots.py MODEL.ncz DATA.csv OUTPUT_FOLDER"""

import sys
from pathlib import Path

from nodecast.compiler import load
from nodecast.compiler.csvio import read_table
from nodecast.compiler.plots import plot_node_ranges, plot_predicted_vs_actual


def main(model: str, data: str, folder: str) -> None:
    bundle = load(model)
    table = read_table(data)
    X = table.numbers(bundle.network.feature_names)
    y = table.numbers(bundle.network.target_names)
    print(plot_node_ranges(bundle, Path(folder) / "nodes.png"))
    print(plot_predicted_vs_actual(bundle, X, y, Path(folder) / "predicted_vs_actual.png"))


if __name__ == "__main__":
    main(*sys.argv[1:4])

"""Benchmark: test RMSE with and without ``--categorical`` on an hourly data set where the
categories matter, beside scikit-learn's HistGradientBoostingRegressor with and without its own
categorical support. Prints JSON; asserts nothing.

The data are invented (a made-up district-heating substation): outdoor temperature and wind
(numbers), hour of day (24 levels), weekday (7) and tariff (4, text), and a heat demand whose hour
profile is not monotone in the hour's number, whose weekday effect is not monotone in its number,
and whose tariff effect interacts with the temperature; plus noise of standard deviation 0.3.
"Without" trains on the same columns with hour and weekday as plain numbers and the tariff as its
position in sorted order.

    python tests/benchmarks/categorical_accuracy.py [--rows 6000] [--nodes 400]
"""

from __future__ import annotations

import argparse
import json

import numpy as np

from nodecast.compiler import reference
from nodecast.compiler.csvio import Table
from nodecast.compiler.levels import table_rows
from nodecast.trainer.training import TrainingJob, train

TARIFFS = ("base", "night", "peak", "shoulder")
NOISE = 0.3


def make_data(rows: int, seed: int):
    rng = np.random.default_rng(seed)
    temp, wind = rng.uniform(-15, 20, rows), rng.uniform(0, 15, rows)
    hour, day = rng.integers(0, 24, rows), rng.integers(0, 7, rows)
    tariff = rng.integers(0, 4, rows)
    hour_profile = 2.0 * np.sin(2 * np.pi * (np.arange(24) - 6) / 24) + 1.5 * np.isin(
        np.arange(24), [7, 8, 18, 19])
    day_effect = np.array([0.8, -0.4, 0.3, -0.6, 0.5, -1.2, 1.0])
    tariff_slope = np.array([0.0, 0.06, -0.08, 0.03])
    demand = (0.02 * (20 - temp) ** 2 / 10 + 0.08 * wind + hour_profile[hour] + day_effect[day]
              + tariff_slope[tariff] * temp + rng.normal(0, NOISE, rows))
    columns = {"temp": temp, "wind": wind, "hour": hour, "weekday": day,
               "tariff": np.array(TARIFFS)[tariff], "demand": demand}
    return columns


def as_table(columns, name: str) -> Table:
    header = list(columns)
    cells = [[c if isinstance(c, str) else repr(float(c)) for c in row]
             for row in zip(*columns.values(), strict=True)]
    return Table(header=header, rows=cells, source=name)


def nodecast_rmse(train_table, test_table, categorical, nodes: int, numeric_tariff: bool) -> float:
    job = TrainingJob(targets=("demand",), categorical=categorical, seed=0,
                      params={"n_nodes": nodes})
    net = train(train_table, job).network
    predicted = reference.predict(net, table_rows(test_table, net))[:, 0]
    truth = test_table.numbers(["demand"])[:, 0]
    return float(np.sqrt(np.mean((predicted - truth) ** 2)))


def numeric_tariff(columns):
    out = dict(columns)
    out["tariff"] = np.searchsorted(TARIFFS, columns["tariff"]).astype(float)
    return out


def hgbr_rmse(train, test, categorical: bool) -> float:
    from sklearn.ensemble import HistGradientBoostingRegressor

    def matrix(columns):
        return np.column_stack([columns["temp"], columns["wind"], columns["hour"],
                                columns["weekday"], np.searchsorted(TARIFFS, columns["tariff"])])

    model = HistGradientBoostingRegressor(
        random_state=0, categorical_features=[2, 3, 4] if categorical else None)
    model.fit(matrix(train), train["demand"])
    return float(np.sqrt(np.mean((model.predict(matrix(test)) - test["demand"]) ** 2)))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=6000)
    parser.add_argument("--nodes", type=int, default=400)
    options = parser.parse_args()
    train_columns, test_columns = make_data(options.rows, 0), make_data(2000, 1)
    with_cat = nodecast_rmse(as_table(train_columns, "train"), as_table(test_columns, "test"),
                             ("hour", "weekday", "tariff"), options.nodes, False)
    without = nodecast_rmse(as_table(numeric_tariff(train_columns), "train"),
                            as_table(numeric_tariff(test_columns), "test"), (), options.nodes, True)
    result = {"rows": options.rows, "test_rows": 2000, "nodes": options.nodes, "noise_std": NOISE,
              "nodecast_with_categorical": with_cat, "nodecast_without_categorical": without,
              "hgbr_with_categorical": hgbr_rmse(train_columns, test_columns, True),
              "hgbr_without_categorical": hgbr_rmse(train_columns, test_columns, False)}
    result["ratio_with_to_hgbr"] = result["nodecast_with_categorical"] / result["hgbr_with_categorical"]
    result["ratio_without_to_hgbr"] = (result["nodecast_without_categorical"]
                                       / result["hgbr_with_categorical"])
    print(json.dumps(result, indent=1))


if __name__ == "__main__":
    main()

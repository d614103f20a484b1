"""The built-in demo scenario: an invented cooling-fan controller that estimates a power stage's heatsink
temperature from four sensor readings. The formula and its constants are made up for the demo."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError

FEATURES = ("ambient_temp", "fan_speed", "load_current", "supply_voltage")
UNITS = {"ambient_temp": "degC", "fan_speed": "rpm", "load_current": "A", "supply_voltage": "V",
         "heatsink_temp": "degC"}
DOMAIN = {"ambient_temp": (10.0, 45.0), "fan_speed": (800.0, 4000.0), "load_current": (0.0, 30.0),
          "supply_voltage": (22.0, 26.0)}
TARGET = "heatsink_temp"


def heatsink_temperature(X: np.ndarray) -> np.ndarray:
    """Invented physics: conduction and switching losses through a thermal resistance that drops
    sharply once the fan passes about 1500 rpm (its airflow turns turbulent)."""
    ambient, fan, current, voltage = X.T
    losses = 0.015 * current**2 + 0.004 * voltage * current  # W
    resistance = 0.3 + 2.2 / (1.0 + np.exp((fan - 1500.0) / 200.0))  # K/W
    return ambient + resistance * losses


def make_readings(n_rows: int, seed: int, noise: float = 0.3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    low = np.array([DOMAIN[f][0] for f in FEATURES])
    high = np.array([DOMAIN[f][1] for f in FEATURES])
    X = low + rng.random((n_rows, len(FEATURES))) * (high - low)
    y = heatsink_temperature(X) + noise * rng.standard_normal(n_rows)
    return np.column_stack([X, y])


DATA_FILES = ("readings.csv", "held_out.csv")
ARTIFACTS = (("onnx", "fan.onnx", "float64"), ("c", "fan_c", "float32"),
             ("python", "fan_predictor.py", "float64"))


def demo_outputs(data_only: bool) -> list[str]:
    """The names the demo writes into its folder."""
    if data_only:
        return list(DATA_FILES)
    return [*DATA_FILES, "fan.ncast", *(name for _, name, _ in ARTIFACTS),
            *(f"verify_{target}.json" for target, _, _ in ARTIFACTS)]


def check_demo_outputs(folder: Path, data_only: bool, overwrite: bool) -> None:
    """Before any work: refuse to replace a file of the user's unless ``overwrite``."""
    from nodecast.compiler.files import refuse_existing

    if folder.exists() and not folder.is_dir():
        raise NodecastError(f"{folder} exists and is not a folder")
    if not folder.is_dir():
        return
    for name in demo_outputs(data_only):
        path = folder / name
        if path.is_dir() and name == "fan_c":
            if not overwrite and any(path.iterdir()):
                raise NodecastError(f"{path} already exists; pass --overwrite to replace the "
                                    "demo's files")
        elif path.exists() or path.is_symlink():
            refuse_existing(path, overwrite)


def write_csv(path: Path, table: np.ndarray, overwrite: bool = False) -> None:
    from nodecast.compiler.csvio import write_table
    from nodecast.compiler.files import write_atomic

    text = write_table(list(FEATURES) + [TARGET], table.tolist())
    write_atomic(path, text.encode("utf-8"), overwrite=overwrite)


def write_data(folder: Path, overwrite: bool = False) -> tuple[np.ndarray, np.ndarray]:
    """Write readings.csv (2,000 noisy rows) and held_out.csv (500 noiseless rows)."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise NodecastError(f"cannot create the demo folder {folder}: {exc.strerror or exc}") from None
    train_rows, test_rows = make_readings(2000, seed=1), make_readings(500, seed=2, noise=0.0)
    write_csv(folder / "readings.csv", train_rows, overwrite)
    write_csv(folder / "held_out.csv", test_rows, overwrite)
    return train_rows, test_rows


def _held_out_rmse(net, table) -> float:
    from nodecast.compiler.reference import predict

    return float(np.sqrt(np.mean((predict(net, table[:, :-1])[:, 0] - table[:, -1]) ** 2)))


def run_demo(folder: Path, echo=print, overwrite: bool = False) -> int:
    from nodecast.compiler import emit, save
    from nodecast.compiler.backends import BACKENDS
    from nodecast.compiler.csvio import read_table
    from nodecast.compiler.files import write_atomic
    from nodecast.compiler.verify import format_table, verify
    from nodecast.compiler.verify.report import to_json
    from nodecast.trainer.training import TrainingJob, train

    check_demo_outputs(folder, False, overwrite)
    train_rows, test_rows = write_data(folder, overwrite)
    job = TrainingJob(targets=(TARGET,), features=FEATURES, domain=DOMAIN, units=UNITS, seed=0,
                      params={"n_nodes": 200})
    table = read_table(folder / "readings.csv")
    bundle = train(table, job)
    save(bundle, folder / "fan.ncast", overwrite=overwrite)
    baseline = train(table, replace(job, params={"n_nodes": 200, "method": "interval"}))
    echo(f"trained fan.ncast (bundle {bundle.bundle_id[:12]}): held-out RMSE "
         f"{_held_out_rmse(bundle.network, test_rows):.4f} degC; fixed-interval U(-1, 1) "
         f"baseline of the same size {_held_out_rmse(baseline.network, test_rows):.4f} degC")
    status = 0
    # ONNX in float64: a runtime's Gemm may sum in any order, so a float32 graph's certified bound
    # is far looser than the C back-end's (whose order is known); see docs/verification.md
    for target, name, precision in ARTIFACTS:
        try:
            extra = {"prefix": "fan"} if target == "c" else {}  # as emit names it from fan.ncast
            emit(bundle, target, folder / name, overwrite=overwrite, precision=precision, **extra)
        except Exception as exc:  # a target not built in this version is skipped, and said so
            if target in BACKENDS and "not available" in str(exc):
                echo(f"{target}: not available in this version, skipped")
                continue
            raise
        report = verify(bundle, folder / name, data=test_rows[:, :-1])
        write_atomic(folder / f"verify_{target}.json", to_json(report.as_dict()).encode("utf-8"),
                     overwrite=overwrite)
        echo(f"--- {target}: {name}")
        echo(format_table(report))
        status = status or (0 if report.passed else 1)
    echo(f"demo {'passed' if status == 0 else 'FAILED'}; outputs in {folder}")
    return status

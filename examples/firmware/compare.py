"""Compare the emulated Cortex-M4's results with the trained model (float64 reference).
Usage: python3 compare.py MODEL.ncast DATA.csv RESULTS.txt FIRMWARE_FOLDER
Exit 1 when a result differs from the model by more than the certified bound the header states."""

import re
import sys
from pathlib import Path

import numpy as np

from nodecast.compiler import load, reference
from nodecast.compiler.csvio import read_table


def main(model: str, data: str, results: str, folder: str) -> int:
    bundle = load(model)
    header = (Path(folder) / "fan.h").read_text(encoding="ascii")
    scale = float(re.search(r"#define FAN_OUTPUT_SCALE_0 ([0-9.e+-]+)", header).group(1))
    lines = [line.split() for line in Path(results).read_text().splitlines() if line.strip()]
    statuses = [int(fields[0]) for fields in lines]
    got = np.array([int(fields[1]) / scale for fields in lines])
    X = read_table(data).numbers(bundle.network.feature_names)[: len(got)]
    want = reference.predict(bundle.network, X)[:, 0]
    limit = float(re.search(r"#define FAN_ERROR_BOUND_0 ([0-9.e+-]+)", header).group(1))
    error = np.abs(got - want)
    print(f"{'row':>3} {'status':>6} {'Cortex-M4 q15':>14} {'model':>10} {'error':>9}")
    for row, (status, g, w, e) in enumerate(zip(statuses, got, want, error, strict=True)):
        print(f"{row:>3} {status:>6} {g:>14.4f} {w:>10.4f} {e:>9.4f}")
    ok = all(s == 0 for s in statuses) and float(error.max()) <= limit
    print(f"max error {error.max():.4f} degC, certified q15 bound {limit:.4f} degC: "
          f"{'within' if ok else 'NOT within'} the bound")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main(*sys.argv[1:5]))

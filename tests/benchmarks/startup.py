"""Start-up cost of everyday commands: CPU seconds (user + system, the process and its children,
so the C footprint's compiler runs count) of ``nodecast --help``, ``emit`` to each target and a
tiny ``train`` (50 rows of the demo data, 20 nodes), against a bare ``python -c pass``.

CPU time, not wall time: the figures stay meaningful on a loaded machine. Each command runs
``REPEATS`` times; the JSON gives the minimum and the median. The targets (issue 19): ``--help``
under 0.15 s, ``emit`` under 1 s, a tiny ``train`` under 1.5 s. Never asserts a time.
Run: python tests/benchmarks/startup.py
"""

from __future__ import annotations

import json
import resource
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

REPEATS = 3


def _cpu_seconds(args: list[str]) -> float:
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    subprocess.run(args, check=True, capture_output=True)
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    return (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)


def _measure(args: list[str]) -> dict:
    times = [_cpu_seconds(args) for _ in range(REPEATS)]
    return {"min_cpu_s": round(min(times), 3), "median_cpu_s": round(statistics.median(times), 3)}


def main() -> None:
    nodecast = [sys.executable, "-m", "nodecast.cli"]
    with tempfile.TemporaryDirectory() as folder:
        out = Path(folder)
        subprocess.run(nodecast + ["demo", "--data-only", "-o", folder], check=True,
                       capture_output=True)
        rows = (out / "readings.csv").read_text().splitlines()[:51]
        (out / "tiny.csv").write_text("\n".join(rows) + "\n")
        train = nodecast + ["train", str(out / "tiny.csv"), "--target", "heatsink_temp",
                            "--nodes", "20", "-o", str(out / "m.ncast"), "--overwrite"]
        subprocess.run(train, check=True, capture_output=True)
        commands = {
            "python -c pass": [sys.executable, "-c", "pass"],
            "nodecast --help": nodecast + ["--help"],
            "emit --to c": nodecast + ["emit", str(out / "m.ncast"), "--to", "c", "-o",
                                       str(out / "c"), "--overwrite"],
            "emit --to python": nodecast + ["emit", str(out / "m.ncast"), "--to", "python", "-o",
                                            str(out / "m.py"), "--overwrite"],
            "emit --to onnx": nodecast + ["emit", str(out / "m.ncast"), "--to", "onnx", "-o",
                                          str(out / "m.onnx"), "--overwrite"],
            "train (50 rows, 20 nodes)": train,
        }
        results = {name: _measure(args) for name, args in commands.items()}
    print(json.dumps({"repeats": REPEATS, "unit": "CPU seconds", "commands": results}, indent=2))


if __name__ == "__main__":
    main()

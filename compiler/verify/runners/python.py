"""Run a generated Python predictor as its users will: its own command line, in a separate
``python3 -I -S`` process (isolated: no site-packages, so no NumPy), on every row in one call.

Rows travel as CSV with ``repr`` numbers, which round-trip float64 exactly both ways; the predictor
runs with ``--scores --keep-going`` so that classifiers return their per-class scores and rows
rejected under the 'reject' policy come back as NaN rows.
"""

from __future__ import annotations

import ast
import csv
import io
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np

from nodecast.compiler.errors import NodecastError
from nodecast.compiler.toolchain import artifact_environment

_CONSTANTS = ("BUNDLE_ID", "PRECISION", "OUT_OF_DOMAIN", "TASK", "TOOL_VERSION", "FEATURE_NAMES",
              "N_OUTPUTS")
# the bound, and the names and levels of predictors with categorical inputs
_OPTIONAL_CONSTANTS = ("CERTIFIED_BOUND", "CATEGORICAL_NAMES", "CATEGORICAL_LEVELS")
_SECONDS_PER_ROW = 0.01  # generous: a 2000-node predictor takes about a millisecond per row
_MIN_SECONDS = 120.0
MIN_VERSION = (3, 8)  # the oldest Python the generated predictor supports
_PRINT_VERSION = "import sys; print(*sys.version_info[:2])"


def read_constants(path: Path) -> dict:
    """The generated file's module-level literal constants, read with ``ast`` (never executed)."""
    try:
        tree = ast.parse(Path(path).read_text(encoding="utf-8"), filename=str(path))
    except (OSError, UnicodeDecodeError, SyntaxError, ValueError) as exc:
        raise NodecastError(f"{path} is not a readable Python file: {' '.join(str(exc).split())}") \
            from None
    found = {}
    for node in tree.body:
        if (isinstance(node, ast.Assign) and len(node.targets) == 1
                and isinstance(node.targets[0], ast.Name)
                and node.targets[0].id in _CONSTANTS + _OPTIONAL_CONSTANTS):
            try:
                found[node.targets[0].id] = ast.literal_eval(node.value)
            except ValueError:
                continue
    missing = [name for name in _CONSTANTS if name not in found]
    if missing:
        raise NodecastError(f"{path} was not made by nodecast (no {', '.join(missing)})")
    names = found["FEATURE_NAMES"]
    if (not isinstance(names, (list, tuple)) or not all(isinstance(n, str) for n in names)
            or type(found["N_OUTPUTS"]) is not int
            or not all(isinstance(found[k], str) for k in _CONSTANTS[:5])):
        raise NodecastError(f"{path} declares constants of the wrong type (edited?)")
    return found


def describe(path: Path, interpreters=None, **_options) -> dict:
    """kind, bundle_id, precision, out_of_domain of the predictor, and the interpreters to use.

    ``interpreters``: None (the interpreter running nodecast), "all" (every Python 3.8+ that
    :func:`find_interpreters` finds), or an executable path or a list of them. Each becomes one
    verify engine, named ``python3.N``.
    """
    constants = read_constants(path)
    chosen = _interpreters(interpreters)
    return {"kind": "python", "bundle_id": constants["BUNDLE_ID"],
            "precision": constants["PRECISION"], "out_of_domain": constants["OUT_OF_DOMAIN"],
            "certified_bound": constants.get("CERTIFIED_BOUND"),
            "task": constants["TASK"], "tool_version": constants["TOOL_VERSION"],
            "engines": list(chosen), "interpreters": chosen,
            "feature_names": list(constants["FEATURE_NAMES"]), "n_outputs": constants["N_OUTPUTS"],
            "categorical": [[name, list(levels)] for name, levels in zip(
                constants.get("CATEGORICAL_NAMES", ()), constants.get("CATEGORICAL_LEVELS", ()),
                strict=True)]}


def _interpreters(spec) -> dict[str, str]:
    if spec is None:
        return {f"python{sys.version_info[0]}.{sys.version_info[1]}": sys.executable}
    if spec == "all":
        return {f"python{a}.{b}": exe for (a, b), exe in find_interpreters().items()}
    chosen = {}
    for executable in [spec] if isinstance(spec, (str, os.PathLike)) else spec:
        version = interpreter_version(str(executable))
        if version is None or version < MIN_VERSION:
            raise NodecastError(f"{executable} is not a working Python "
                                f"{MIN_VERSION[0]}.{MIN_VERSION[1]}+ interpreter")
        chosen[f"python{version[0]}.{version[1]}"] = str(executable)
    return chosen


def rows_as_csv(feature_names, X: np.ndarray, categorical=()) -> bytes:
    """CSV text of the rows under a header of feature names; numbers by ``repr`` (exact).

    ``categorical``: (name, levels) per categorical input; the columns of ``X`` after the features
    are level codes, written as the level's text (a code that names no level as a text that is
    none of the levels)."""
    X = np.asarray(X, dtype=float)
    n = len(feature_names)
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(list(feature_names) + [name for name, _ in categorical])
    texts = []
    for c, (_, levels) in enumerate(categorical):
        unknown = "unknown-level"
        while unknown in levels:
            unknown += "?"
        column = X[:, n + c]
        known = (column >= 0) & (column < len(levels)) & (column == np.floor(column))
        texts.append([levels[int(v)] if ok else unknown for v, ok in zip(column, known, strict=True)])
    for r, row in enumerate(X[:, :n].tolist()):
        writer.writerow([repr(value) for value in row] + [column[r] for column in texts])
    return buffer.getvalue().encode("utf-8")


def run(path: Path, X: np.ndarray, info: dict) -> np.ndarray:
    """The predictor's per-output values (classifiers: per-class scores), shape (n_rows, n_outputs);
    rows rejected under the 'reject' policy are NaN rows."""
    X = np.atleast_2d(np.asarray(X, dtype=np.float64))
    interpreters = info["interpreters"]
    executable = interpreters.get(info.get("engine"), next(iter(interpreters.values())))
    command = [executable, "-I", "-S", str(path), "--scores", "--keep-going"]
    try:
        done = subprocess.run(command, input=rows_as_csv(info["feature_names"], X,
                                                         info.get("categorical", ())),
                              capture_output=True, timeout=_MIN_SECONDS + _SECONDS_PER_ROW * len(X),
                              check=False, env=artifact_environment())
    except (OSError, subprocess.TimeoutExpired) as exc:
        raise NodecastError(f"cannot run {path} with {executable}: {exc}") from None
    if done.returncode != 0:
        message = done.stderr.decode("utf-8", "replace").strip().splitlines() or ["(no message)"]
        raise NodecastError(f"{path} failed with exit status {done.returncode}: {message[-1]}")
    records = list(csv.reader(io.StringIO(done.stdout.decode("utf-8"), newline="")))
    values = np.array([[float(cell) for cell in record[-info["n_outputs"]:]]
                       for record in records[1:]], dtype=np.float64)
    if values.shape != (X.shape[0], info["n_outputs"]):
        raise NodecastError(f"{path} wrote {values.shape} values for {X.shape[0]} rows")
    return values


def interpreter_version(executable: str) -> tuple[int, int] | None:
    """(major, minor) of a Python interpreter, or None if it does not run."""
    try:
        done = subprocess.run([executable, "-I", "-S", "-c", _PRINT_VERSION], capture_output=True,
                              timeout=30, check=False)
    except (OSError, subprocess.TimeoutExpired):
        return None
    parts = done.stdout.split()
    return (int(parts[0]), int(parts[1])) if done.returncode == 0 and len(parts) == 2 else None


def find_interpreters(minimum: tuple[int, int] = MIN_VERSION) -> dict[tuple[int, int], str]:
    """Working Python interpreters on this machine, one per version >= ``minimum``: ``python3.N``
    on the PATH, pyenv's versions, and the one running nodecast."""
    candidates = [sys.executable] + [shutil.which(f"python3.{minor}") for minor in range(8, 30)]
    pyenv = Path(os.environ.get("PYENV_ROOT", Path.home() / ".pyenv")) / "versions"
    if pyenv.is_dir():
        candidates += sorted(str(p) for p in pyenv.glob("*/bin/python3")
                             if re.match(r"3\.\d+", p.parts[-3]))
    found: dict[tuple[int, int], str] = {}
    for executable in filter(None, candidates):
        version = interpreter_version(executable)
        if version and version >= minimum and version not in found:
            found[version] = executable
    return dict(sorted(found.items()))

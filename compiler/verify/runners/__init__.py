"""One runner per artifact kind, each a module with ``describe(path) -> dict`` and
``run(path, X, info) -> ndarray`` of shape (n_rows, n_outputs); rejected rows come back as NaN."""

from __future__ import annotations

import importlib
from pathlib import Path

from nodecast.compiler.errors import NodecastError

RUNNERS = {
    "onnx": "nodecast.compiler.verify.runners.onnx",
    "c": "nodecast.compiler.verify.runners.c",
    "python": "nodecast.compiler.verify.runners.python",
}


def detect_kind(path: Path) -> str:
    """The artifact kind from the path: a .onnx file, a .py file, or a folder holding C sources."""
    if path.is_dir():
        if any(path.glob("*.c")) and any(path.glob("*.h")):
            return "c"
        raise NodecastError(f"folder {path} holds no generated C sources (*.c and *.h)")
    if not path.is_file():
        raise NodecastError(f"artifact {path} does not exist")
    if path.suffix == ".onnx":
        return "onnx"
    if path.suffix == ".py":
        return "python"
    raise NodecastError(f"cannot tell the kind of artifact {path}: expected .onnx, .py or a C folder")


def runner(kind: str):
    try:
        return importlib.import_module(RUNNERS[kind])
    except ModuleNotFoundError:
        raise NodecastError(f"no runner for {kind!r} artifacts in this version") from None

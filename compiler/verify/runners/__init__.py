"""One runner per artifact kind, each a module with the same two functions:

``describe(path, **options) -> dict``
    Read the artifact's provenance without running it: ``kind``, ``bundle_id``, ``precision``,
    ``out_of_domain`` (policy), optionally ``activation_error`` (the activation implementation's own
    stated absolute error) and ``engines`` (the runtimes it can run in; default one, named by kind).
    Raises NodecastError for an unreadable artifact or one not made by nodecast.
``run(path, X, info) -> ndarray``
    Outputs of shape (n_rows, n_outputs) in target units for X of shape (n_rows, n_features);
    rejected rows come back as NaN rows. ``info`` is what ``describe`` returned, plus ``engine``.

A runner may also have ``run_labels(path, X, info) -> ndarray of n_rows str, or None``: the class
labels the artifact itself outputs (None when this artifact has none). Verify calls it for
classifiers and requires each label to be the class of the artifact's own highest score.

The kind is detected from the artifact itself (:func:`detect_kind`).
"""

from __future__ import annotations

import importlib
from pathlib import Path

from nodecast.compiler.errors import NodecastError

RUNNERS = {
    "onnx": "nodecast.compiler.verify.runners.onnx",
    "c": "nodecast.compiler.verify.runners.c",
    "python": "nodecast.compiler.verify.runners.python",
}
_SNIFF_BYTES = 4096


def _sniff(path: Path) -> str | None:
    """The kind of a file without a telling suffix, from its first bytes, or None."""
    try:
        with path.open("rb") as handle:
            head = handle.read(_SNIFF_BYTES)
    except OSError as exc:
        raise NodecastError(f"cannot read artifact {path}: {exc.strerror or exc}") from None
    if head[:1] == b"\x08" and b"nodecast" in head:  # ModelProto field 1 (ir_version) comes first
        return "onnx"
    if head.lstrip().startswith((b'"""', b"#!", b"#")) and b"nodecast" in head:
        return "python"
    return None


def detect_kind(path: str | Path) -> str:
    """The artifact kind: a folder holding C sources, a .onnx or .py file, or, for any other file
    name, what its first bytes show."""
    path = Path(path)
    if path.is_dir():
        if any(path.glob("*.c")) and any(path.glob("*.h")):
            return "c"
        raise NodecastError(f"folder {path} holds no generated C sources (*.c and *.h)")
    if not path.is_file():
        raise NodecastError(f"artifact {path} does not exist")
    by_suffix = {".onnx": "onnx", ".py": "python"}.get(path.suffix.lower())
    kind = by_suffix or _sniff(path)
    if kind is None:
        raise NodecastError(f"cannot tell the kind of artifact {path}: expected a .onnx or .py "
                            "file made by nodecast, or a folder of generated C")
    return kind


def runner(kind: str):
    """The runner module of ``kind``; NodecastError when this version has none."""
    if kind not in RUNNERS:
        raise NodecastError(f"unknown artifact kind {kind!r}; known: {', '.join(RUNNERS)}")
    try:
        return importlib.import_module(RUNNERS[kind])
    except ModuleNotFoundError as exc:
        if exc.name == RUNNERS[kind]:
            raise NodecastError(f"no runner for {kind!r} artifacts in this version") from None
        raise


def available_kinds() -> list[str]:
    """The kinds whose back-end and runner both exist in this installation."""
    from nodecast.compiler.backends import BACKENDS

    kinds = []
    for kind, module_name in RUNNERS.items():
        try:
            importlib.import_module(module_name)
            importlib.import_module(BACKENDS[kind])
        except ModuleNotFoundError as exc:
            if exc.name in (module_name, BACKENDS[kind]):
                continue
            raise
        kinds.append(kind)
    return kinds

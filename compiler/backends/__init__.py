"""Back-ends: each turns a bundle into the files of one kind of artifact.

A back-end module exposes ``render(bundle, **options) -> Artifact``; it reads only the IR and the
bundle's metadata, never the trainer. Modules load on first use, so the CLI starts fast.
"""

from __future__ import annotations

import importlib
from dataclasses import dataclass, field

from nodecast.compiler.errors import NodecastError

BACKENDS = {
    "onnx": "nodecast.compiler.backends.onnx",
    "c": "nodecast.compiler.backends.c",
    "python": "nodecast.compiler.backends.python",
}


@dataclass(frozen=True)
class Artifact:
    """Generated files by name. A single-file artifact is written to the output path itself; a
    multi-file one into the output folder. ``summary`` holds figures for the user (estimate, sizes)."""

    kind: str
    files: dict[str, bytes]
    single_file: bool
    summary: dict = field(default_factory=dict)


def render(bundle, to: str, **options) -> Artifact:
    if to not in BACKENDS:
        raise NodecastError(f"unknown target {to!r}; choose one of: {', '.join(BACKENDS)}")
    try:
        module = importlib.import_module(BACKENDS[to])
    except ModuleNotFoundError as exc:
        if exc.name == BACKENDS[to]:
            raise NodecastError(f"target {to!r} is not available in this version") from None
        raise
    try:
        return module.render(bundle, **options)
    except OverflowError as exc:  # a value beyond what the target's number formats can hold
        raise NodecastError(f"cannot emit {to}: a value of the model does not fit the target's "
                            f"number format ({exc})") from None

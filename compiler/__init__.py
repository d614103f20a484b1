"""Compiler side of nodecast: the IR, bundles, passes, back-ends and verification."""

from __future__ import annotations

import math

from nodecast.compiler.bundle import Bundle, load, save
from nodecast.compiler.errors import BundleError, NodecastError
from nodecast.compiler.ir import Network


def emit(bundle: Bundle, to: str, path=None, overwrite: bool = False, max_bytes: int | None = None,
         **options):
    """Render ``bundle`` for target ``to`` ("onnx", "c", "python"); write it to ``path`` if given.

    An artifact larger in total than ``max_bytes`` (default
    :data:`~nodecast.compiler.files.MAX_ARTIFACT_BYTES`) is refused before anything is written.
    Returns the :class:`~nodecast.compiler.backends.Artifact` (file names to bytes, and a summary).
    """
    from nodecast.compiler.backends import render
    from nodecast.compiler.files import (
        MAX_ARTIFACT_BYTES,
        check_artifact_size,
        write_atomic,
        write_files,
    )

    artifact = render(bundle, to, **options)
    estimate = artifact.summary.get("estimate", {}).get("max_abs_error", 0.0)
    bound = max(artifact.summary.get("certificate", {}).get("certified_bound", [0.0]))
    if not (math.isfinite(estimate) and math.isfinite(bound)):
        raise NodecastError(f"the {to} {artifact.summary.get('precision', '')} artifact's error "
                            "cannot be bounded (the model's values overflow that precision); "
                            "choose a wider precision or a better-regularised model")
    check_artifact_size(to, artifact.files, MAX_ARTIFACT_BYTES if max_bytes is None else max_bytes)
    if path is not None:
        if artifact.single_file:
            (data,) = artifact.files.values()
            write_atomic(path, data, overwrite=overwrite)
        else:
            write_files(path, artifact.files, overwrite=overwrite)
    return artifact


__all__ = ["Bundle", "BundleError", "Network", "NodecastError", "emit", "load", "save"]

"""Compiler side of nodecast: the IR, bundles, passes, back-ends and verification."""

from __future__ import annotations

from nodecast.compiler.bundle import Bundle, load, save
from nodecast.compiler.errors import BundleError, NodecastError
from nodecast.compiler.ir import Network


def emit(bundle: Bundle, to: str, path=None, overwrite: bool = False, **options):
    """Render ``bundle`` for target ``to`` ("onnx", "c", "python"); write it to ``path`` if given.

    Returns the :class:`~nodecast.compiler.backends.Artifact` (file names to bytes, and a summary).
    """
    from nodecast.compiler.backends import render
    from nodecast.compiler.files import write_atomic, write_files

    artifact = render(bundle, to, **options)
    if path is not None:
        if artifact.single_file:
            (data,) = artifact.files.values()
            write_atomic(path, data, overwrite=overwrite)
        else:
            write_files(path, artifact.files, overwrite=overwrite)
    return artifact


__all__ = ["Bundle", "BundleError", "Network", "NodecastError", "emit", "load", "save"]

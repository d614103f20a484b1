"""Compiler side of nodecast: the IR, bundles, passes, back-ends and verification."""

from __future__ import annotations

import math

from nodecast.compiler.errors import BundleError, NodecastError

_LAZY = {"Bundle": "nodecast.compiler.bundle", "load": "nodecast.compiler.bundle",
         "save": "nodecast.compiler.bundle", "Network": "nodecast.compiler.ir"}


def __getattr__(name: str):
    """Bundle, load, save and Network load numpy: import them when first asked for, so that
    ``nodecast --help`` and the commands that do not need them start fast."""
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def emit(bundle, to: str, path=None, overwrite: bool = False, max_bytes: int | None = None,
         **options):
    """Render ``bundle`` for target ``to`` ("onnx", "c", "python"); write it to ``path`` if given.

    ``options`` are the target's (:data:`nodecast.compiler.targets.TARGETS`): an unknown or
    misspelt option raises :class:`NodecastError`; defaults follow the precision.

    An artifact larger in total than ``max_bytes`` (default
    :data:`~nodecast.compiler.files.MAX_ARTIFACT_BYTES`) is refused before anything is written.
    Returns the :class:`~nodecast.compiler.backends.Artifact` (file names to bytes, and a summary).
    """
    from nodecast.compiler.backends import render
    from nodecast.compiler.files import MAX_ARTIFACT_BYTES, check_artifact_size, write_artifact
    from nodecast.compiler.limits import check_artifact_estimate, check_memory, estimate_bytes
    from nodecast.compiler.targets import target_spec

    net, limit = bundle.network, MAX_ARTIFACT_BYTES if max_bytes is None else max_bytes
    options = target_spec(to).resolve(options)
    check_artifact_estimate(net, to, options["precision"], limit)
    check_memory(estimate_bytes(net), f"the export-error estimate of {net.n_nodes} nodes",
                 "emit on a machine with more memory, or use fewer nodes")
    artifact = _sealed(_bounded(render(bundle, to, **options), to))
    check_artifact_size(to, artifact.files, limit)
    if path is not None:
        write_artifact(path, artifact, overwrite)
    return artifact


def _bounded(artifact, to: str):
    """``artifact``, refused when its error cannot be bounded (a value overflows its precision)."""
    estimate = artifact.summary.get("estimate", {}).get("max_abs_error", 0.0)
    bound = max(artifact.summary.get("certificate", {}).get("certified_bound", [0.0]))
    if not (math.isfinite(estimate) and math.isfinite(bound)):
        raise NodecastError(f"the {to} {artifact.summary.get('precision', '')} artifact's error "
                            "cannot be bounded (the model's values overflow that precision); "
                            "choose a wider precision or a better-regularised model")
    return artifact


def _sealed(artifact):
    """``artifact`` with every file carrying its own SHA-256 (:mod:`.integrity`)."""
    from dataclasses import replace

    from nodecast.compiler.integrity import seal

    return replace(artifact, files={name: seal(name, data) for name, data in artifact.files.items()})


__all__ = ["Bundle", "BundleError", "Network", "NodecastError", "emit", "load", "save"]

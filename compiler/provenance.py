"""Where a bundle came from: the SHA-256 of the training data file, recorded in the bundle's
metadata (``training_data``: ``sha256``, ``bytes``) by ``train`` and ``select`` and shown by
``inspect``, so that a shipped model can be traced to the exact file it was fitted on. The file's
name is not recorded: a renamed copy of the same data gives the same bundle."""

from __future__ import annotations

import hashlib


def file_record(path) -> dict:
    """``{"sha256": hex digest, "bytes": size}`` of the file at ``path``, read in 1 MiB blocks."""
    digest, size = hashlib.sha256(), 0
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(2**20), b""):
            digest.update(block)
            size += len(block)
    return {"sha256": digest.hexdigest(), "bytes": size}


def with_training_data(bundle, record: dict):
    """``bundle`` with ``record`` (from :func:`file_record`) as its metadata's ``training_data``."""
    from nodecast.compiler.bundle import Bundle

    return Bundle(bundle.network, {**bundle.metadata, "training_data": dict(record)})

"""The types every manifest field of a bundle must have, checked before any of them is used.

Each check returns ``None`` when the value is sound and otherwise a one-line description of the
first problem (the caller turns it into a :class:`~nodecast.compiler.errors.BundleError`). A
manifest that passes :func:`check_manifest` can be indexed without ``KeyError``, ``TypeError`` or
surprises such as a string iterated as a list of names.
"""

from __future__ import annotations

import math
import re
from typing import Any

_SHA256 = re.compile(r"[0-9a-f]{64}")
_ARRAY_KEYS = {"entry", "bytes", "sha256", "shape"}
# metadata records that the tools read as mappings (inspect, train's summary line)
_RECORDS = ("metrics", "diagnostics", "settings")


def _is_int(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def _check_text_record(network: Any, text_fields) -> str | None:
    if not isinstance(network, dict):
        return "manifest field 'network' is not a record"
    expected = set(text_fields) | {"activation", "task"}
    if set(network) != expected:
        return f"manifest field 'network' has keys {sorted(network)}, expected {sorted(expected)}"
    for key in ("activation", "task"):
        if not isinstance(network[key], str):
            return f"network field {key!r} is {type(network[key]).__name__}, not text"
    for key in text_fields:
        value = network[key]
        if key == "categorical_levels":  # a list of lists of text, one per categorical input
            if not isinstance(value, list) or not all(
                    isinstance(group, list) and all(isinstance(item, str) for item in group)
                    for group in value):
                return f"network field {key!r} is not a list of lists of text"
        elif not isinstance(value, list) or not all(isinstance(item, str) for item in value):
            return f"network field {key!r} is not a list of text"
    return None


def _check_array_record(name: str, meta: Any, max_bytes: int) -> str | None:
    if not isinstance(meta, dict) or set(meta) != _ARRAY_KEYS:
        return f"array {name!r} is not described by {sorted(_ARRAY_KEYS)}"
    if meta["entry"] != f"arrays/{name}.npy":
        return f"array {name!r} points at unexpected entry {meta['entry']!r}"
    if not _is_int(meta["bytes"]) or not 0 < meta["bytes"] <= max_bytes:
        return f"array {name!r} declares an unusable size {meta['bytes']!r}"
    if not isinstance(meta["sha256"], str) or not _SHA256.fullmatch(meta["sha256"]):
        return f"array {name!r} has no valid SHA-256 (64 lowercase hex digits)"
    shape = meta["shape"]
    if not isinstance(shape, list) or len(shape) not in (1, 2) or not all(map(_is_int, shape)):
        return f"array {name!r} declares an unusable shape {shape!r}"
    if any(side < 1 for side in shape):
        return (f"array {name!r} has shape {tuple(shape)}; a network needs at least one feature, "
                "one node and one output")
    return None


def check_manifest(manifest: dict, array_fields, text_fields, max_bytes: int) -> str | None:
    """The first problem with the manifest's fields, or None; ``format``, ``format_version`` and
    ``bundle_id`` are the caller's (they decide which message the user sees first)."""
    if not isinstance(manifest.get("tool_version"), str):
        return "manifest field 'tool_version' is missing or not text"
    problem = _check_text_record(manifest.get("network"), text_fields)
    if problem:
        return problem
    arrays = manifest.get("arrays")
    if not isinstance(arrays, dict):
        return "manifest field 'arrays' is not a record"
    if set(arrays) != set(array_fields):
        return f"manifest lists arrays {sorted(arrays)}, expected {sorted(array_fields)}"
    for name in sorted(arrays):
        problem = _check_array_record(name, arrays[name], max_bytes)
        if problem:
            return problem
    if not isinstance(manifest.get("metadata"), dict):
        return "manifest field 'metadata' is missing or not a record"
    return None


def check_metadata(metadata: dict) -> str | None:
    """The first problem with the metadata records the tools read, or None."""
    problem = json_problem(metadata, "metadata")
    if problem:
        return problem
    for key in _RECORDS:
        if key in metadata and not isinstance(metadata[key], dict):
            return f"metadata field {key!r} is not a record"
    metrics = metadata.get("metrics", {})
    for split, values in metrics.items():
        if not isinstance(values, dict):
            return f"metadata metrics for {split!r} are not a record"
    return None


def _text_problem(text: str, where: str) -> str | None:
    """Text that is not valid Unicode (a lone surrogate, which JSON's \\u escapes can carry) cannot
    be printed or written as UTF-8."""
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        return f"{where} holds text that is not valid Unicode (a lone surrogate)"
    return None


def json_problem(value: Any, where: str) -> str | None:
    """Why ``value`` cannot be stored as strict JSON (non-finite float, non-text key, foreign type),
    naming where it sits, or None. Tuples are accepted and stored as lists."""
    if isinstance(value, str):
        return _text_problem(value, where)
    if value is None or isinstance(value, (bool, int)):
        return None
    if isinstance(value, float):
        return None if math.isfinite(value) else f"{where} is {value!r}, not a finite number"
    if isinstance(value, (list, tuple)):
        for index, item in enumerate(value):
            problem = json_problem(item, f"{where}[{index}]")
            if problem:
                return problem
        return None
    if isinstance(value, dict):
        for key, item in value.items():
            if not isinstance(key, str):
                return f"{where} has a key {key!r} that is not text"
            problem = _text_problem(key, f"a key of {where}") or json_problem(item, f"{where}.{key}")
            if problem:
                return problem
        return None
    return (f"{where} is a {type(value).__name__}, which a bundle cannot store "
            "(use plain numbers, text, lists and records)")

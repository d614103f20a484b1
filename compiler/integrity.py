"""A SHA-256 of every generated file, recorded in the file itself, so that verify can say when an
artifact was changed after emit.

Each file carries the line ``nodecast-sha256:<64 hex digits>`` (a comment in C, Python and linker
scripts; a metadata property in ONNX): the digest of the file's bytes with those 64 digits written
as zeros. Checking zeroes them again and compares. The record detects edits, not forgery: anyone
can recompute it, as with a bundle's hashes.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

MARK = b"nodecast-sha256:"
_ZEROS = b"0" * 64
_NOTE = b"SHA-256 of this file with the 64 digits below zeroed (nodecast verify checks it)"
_COMMENTS = {".py": (b"# " + _NOTE + b"\n# ", b"\n"),
             ".c": (b"/* " + _NOTE + b":\n   ", b" */\n"),
             ".h": (b"/* " + _NOTE + b":\n   ", b" */\n"),
             ".ld": (b"/* " + _NOTE + b":\n   ", b" */\n")}
ONNX_KEY = "nodecast.sha256"


def _with_placeholder(name: str, data: bytes) -> bytes:
    suffix = Path(name).suffix.lower()
    if suffix == ".onnx":
        import onnx

        model = onnx.load_from_string(data)
        model.metadata_props.add(key=ONNX_KEY, value=(MARK + _ZEROS).decode("ascii"))
        return model.SerializeToString(deterministic=True)
    opening, closing = _COMMENTS[suffix]
    return data + opening + MARK + _ZEROS + closing


def seal(name: str, data: bytes) -> bytes:
    """``data`` with its own SHA-256 recorded (the record is the file's last ``MARK``)."""
    data = _with_placeholder(name, data)
    at = data.rfind(MARK) + len(MARK)
    digest = hashlib.sha256(data).hexdigest().encode("ascii")
    return data[:at] + digest + data[at + 64:]


def status(data: bytes) -> str:
    """"unchanged", "changed" (the bytes differ from what emit recorded) or "unrecorded"."""
    at = data.rfind(MARK)
    if at < 0:
        return "unrecorded"
    at += len(MARK)
    recorded = data[at:at + 64]
    zeroed = data[:at] + _ZEROS + data[at + 64:]
    return "unchanged" if hashlib.sha256(zeroed).hexdigest().encode("ascii") == recorded \
        else "changed"


def check_files(paths) -> dict[str, str]:
    """File name -> :func:`status` for each generated file of an artifact."""
    result = {}
    for path in paths:
        try:
            result[Path(path).name] = status(Path(path).read_bytes())
        except OSError:
            result[Path(path).name] = "unreadable"
    return result

"""The bundle (``.ncz``): the IR plus a metadata record, in one zip archive of our own layout.

Layout: ``manifest.json`` and one little-endian float64 ``.npy`` entry per array under ``arrays/``,
all stored uncompressed with a fixed timestamp, so that the same model gives the same bytes. The
manifest records the SHA-256 and size of every array entry; the bundle id is the SHA-256 of the
canonical manifest (sorted keys, compact separators, the id left out). Loading recomputes both and
refuses any mismatch, unknown or missing entries, unsafe names and oversized entries. No pickle.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from nodecast.compiler.errors import BundleError
from nodecast.compiler.files import write_atomic
from nodecast.compiler.ir import ARRAY_FIELDS, Network
from nodecast.compiler.version import __version__

FORMAT_NAME = "nodecast-bundle"
FORMAT_VERSION = 1
MANIFEST = "manifest.json"
MAX_MANIFEST_BYTES = 16 * 2**20
MAX_ARRAY_BYTES = 2 * 2**30
_ZIP_TIME = (1980, 1, 1, 0, 0, 0)
_TEXT_FIELDS = ("feature_names", "feature_units", "target_names", "target_units", "class_labels")


@dataclass(frozen=True, eq=False)
class Bundle:
    """A network and its metadata (training settings, seed, metrics, diagnostics)."""

    network: Network
    metadata: dict[str, Any] = field(default_factory=dict)

    @property
    def bundle_id(self) -> str:
        return _bundle_id(_manifest(self))


def _npy_bytes(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, np.ascontiguousarray(array, dtype="<f8"), allow_pickle=False)
    return buffer.getvalue()


def _canonical(document: dict) -> bytes:
    return json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False).encode("ascii")


def _bundle_id(manifest: dict) -> str:
    body = {key: value for key, value in manifest.items() if key != "bundle_id"}
    return hashlib.sha256(_canonical(body)).hexdigest()


def _manifest(bundle: Bundle) -> dict:
    net = bundle.network
    arrays = {}
    for name, array in net.arrays().items():
        data = _npy_bytes(array)
        arrays[name] = {"entry": f"arrays/{name}.npy", "bytes": len(data),
                        "sha256": hashlib.sha256(data).hexdigest(), "shape": list(array.shape)}
    network = {name: list(getattr(net, name)) for name in _TEXT_FIELDS}
    network.update(activation=net.activation, task=net.task)
    return {"format": FORMAT_NAME, "format_version": FORMAT_VERSION, "tool_version": __version__,
            "network": network, "arrays": arrays, "metadata": bundle.metadata}


def to_bytes(bundle: Bundle) -> bytes:
    """The archive's bytes; the same bundle always gives the same bytes."""
    manifest = _manifest(bundle)
    manifest["bundle_id"] = _bundle_id(manifest)
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_STORED) as archive:
        entries = [(MANIFEST, json.dumps(manifest, sort_keys=True, indent=1).encode("ascii") + b"\n")]
        entries += [(meta["entry"], _npy_bytes(getattr(bundle.network, name)))
                    for name, meta in sorted(manifest["arrays"].items())]
        for entry, data in entries:
            info = zipfile.ZipInfo(entry, date_time=_ZIP_TIME)
            info.external_attr = 0o644 << 16
            archive.writestr(info, data)
    return buffer.getvalue()


def save(bundle: Bundle, path: str | os.PathLike, overwrite: bool = False) -> Path:
    """Write ``bundle`` to ``path`` atomically; refuse to replace a file unless ``overwrite``."""
    return write_atomic(path, to_bytes(bundle), overwrite=overwrite)


def load(path: str | os.PathLike) -> Bundle:
    """Read and check a bundle; raise :class:`BundleError` with a one-line reason if it is not sound."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise BundleError(f"cannot read bundle {path}: {exc.strerror or exc}") from None
    return from_bytes(data, str(path))


def from_bytes(data: bytes, label: str = "bundle") -> Bundle:
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            return _read_archive(archive, label)
    except BundleError:
        raise
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, NotImplementedError,
            RuntimeError, UnicodeDecodeError, ValueError, KeyError, TypeError, OverflowError) as exc:
        raise BundleError(f"{label} is not a readable bundle: {_one_line(exc)}") from None


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


def _read_entry(archive: zipfile.ZipFile, name: str, limit: int, label: str) -> bytes:
    info = archive.getinfo(name)
    if info.compress_type != zipfile.ZIP_STORED:
        raise BundleError(f"{label}: entry {name!r} is compressed; bundles store entries uncompressed")
    if info.file_size > limit:
        raise BundleError(f"{label}: entry {name!r} is {info.file_size} bytes, over the limit {limit}")
    with archive.open(info) as handle:
        payload = handle.read(limit + 1)
    if len(payload) > limit:
        raise BundleError(f"{label}: entry {name!r} is larger than declared")
    return payload


def _check_names(archive: zipfile.ZipFile, label: str) -> None:
    seen = set()
    for name in archive.namelist():
        if name.startswith(("/", "\\")) or ".." in name.replace("\\", "/").split("/") or ":" in name:
            raise BundleError(f"{label}: unsafe entry name {name!r}")
        if name in seen:
            raise BundleError(f"{label}: duplicate entry {name!r}")
        seen.add(name)
    if MANIFEST not in seen:
        raise BundleError(f"{label}: no {MANIFEST}; not a nodecast bundle")


def _read_manifest(archive: zipfile.ZipFile, label: str) -> dict:
    manifest = json.loads(_read_entry(archive, MANIFEST, MAX_MANIFEST_BYTES, label).decode("ascii"))
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT_NAME:
        raise BundleError(f"{label}: manifest does not describe a {FORMAT_NAME}")
    version = manifest.get("format_version")
    if not isinstance(version, int) or isinstance(version, bool) or not 1 <= version <= FORMAT_VERSION:
        raise BundleError(f"{label}: format version {version!r} is not one this tool reads "
                          f"(1..{FORMAT_VERSION}); upgrade nodecast")
    if manifest.get("bundle_id") != _bundle_id(manifest):
        raise BundleError(f"{label}: manifest does not match its bundle id (changed or damaged)")
    return manifest


def _read_array(archive: zipfile.ZipFile, name: str, meta: dict, label: str) -> np.ndarray:
    entry = meta["entry"]
    if entry != f"arrays/{name}.npy":
        raise BundleError(f"{label}: array {name!r} points at unexpected entry {entry!r}")
    declared = meta["bytes"]
    if not isinstance(declared, int) or not 0 < declared <= MAX_ARRAY_BYTES:
        raise BundleError(f"{label}: array {name!r} declares an unusable size {declared!r}")
    payload = _read_entry(archive, entry, declared, label)
    if len(payload) != declared or hashlib.sha256(payload).hexdigest() != meta["sha256"]:
        raise BundleError(f"{label}: array {name!r} does not match its SHA-256 (changed or damaged)")
    array = np.load(io.BytesIO(payload), allow_pickle=False)
    if array.dtype != np.dtype("<f8") or list(array.shape) != meta["shape"]:
        raise BundleError(f"{label}: array {name!r} has dtype {array.dtype} and shape {array.shape}, "
                          f"expected float64 {meta['shape']}")
    return array


def _read_archive(archive: zipfile.ZipFile, label: str) -> Bundle:
    _check_names(archive, label)
    manifest = _read_manifest(archive, label)
    declared = manifest["arrays"]
    if set(declared) != set(ARRAY_FIELDS):
        raise BundleError(f"{label}: manifest lists arrays {sorted(declared)}, expected {sorted(ARRAY_FIELDS)}")
    expected_entries = {MANIFEST} | {meta["entry"] for meta in declared.values()}
    unexpected = set(archive.namelist()) - expected_entries
    if unexpected:
        raise BundleError(f"{label}: unexpected entries {sorted(unexpected)}")
    arrays = {name: _read_array(archive, name, meta, label) for name, meta in declared.items()}
    text = manifest["network"]
    try:
        network = Network(activation=text["activation"], task=text["task"], **arrays,
                          **{name: tuple(text[name]) for name in _TEXT_FIELDS})
    except (ValueError, TypeError) as exc:
        raise BundleError(f"{label}: network is inconsistent: {_one_line(exc)}") from None
    metadata = manifest["metadata"]
    if not isinstance(metadata, dict):
        raise BundleError(f"{label}: metadata is not a record")
    return Bundle(network=network, metadata=metadata)

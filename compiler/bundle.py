"""The bundle (``.ncast``): the IR plus a metadata record, in one zip archive of our own layout.

Layout: ``manifest.json`` and one little-endian float64 ``.npy`` entry per array under ``arrays/``,
all stored uncompressed with a fixed timestamp, so that the same model gives the same bytes. The
manifest records the SHA-256 and size of every array entry; the bundle id is the SHA-256 of the
canonical manifest (sorted keys, compact separators, the id left out).

Loading trusts nothing: it bounds the file, the archive's directory and every entry before reading
it, refuses unsafe, unknown, missing, compressed or encrypted entries, recomputes the id and every
array hash, checks the type of every manifest field it reads (see ``bundle_schema``) and parses the
``.npy`` headers itself (no pickle, no allocation sized by an unchecked header). Any problem is a
:class:`BundleError` with a one-line reason. The hashes detect damage, not forgery:
anyone can write a consistent bundle, so every field is checked as if hostile.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import stat
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from nodecast.compiler.bundle_schema import check_manifest, check_metadata, json_problem
from nodecast.compiler.errors import BundleError, one_line
from nodecast.compiler.files import write_atomic
from nodecast.compiler.ir import ARRAY_FIELDS, Network
from nodecast.compiler.version import __version__

FORMAT_NAME = "nodecast-bundle"
FORMAT_VERSION = 2  # 2: categorical inputs; bundles without them are still written as version 1
MANIFEST = "manifest.json"
MAX_BUNDLE_BYTES = 2 * 2**30
MAX_MANIFEST_BYTES = 16 * 2**20
MAX_NPY_HEADER_BYTES = 4096
# A bundle has 11 entries and a ~1 KiB zip directory; anything far beyond is refused before the zip
# reader builds its table in memory (the name checks then report smaller surprises precisely).
MAX_DIRECTORY_ENTRIES = 64
MAX_DIRECTORY_BYTES = 64 * 2**10
EXPECTED_ENTRIES = frozenset({MANIFEST} | {f"arrays/{name}.npy" for name in ARRAY_FIELDS})
_ZIP_TIME = (1980, 1, 1, 0, 0, 0)
_ZIP_UNIX = 3  # "made by" system in every entry, fixed so that bytes do not depend on the platform
_TEXT_FIELDS = ("feature_names", "feature_units", "target_names", "target_units", "class_labels")
# version 2, present exactly when the network has categorical inputs (see ir.py)
CATEGORICAL_FIELDS = ("categorical_names", "categorical_levels")
LEVEL_ENTRY = "arrays/level_weights.npy"


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
    problem = json_problem(bundle.metadata, "metadata")
    if problem:
        raise BundleError(f"cannot store the bundle: {problem}")
    net = bundle.network
    arrays = {}
    for name, array in net.arrays().items():
        data = _npy_bytes(array)
        arrays[name] = {"entry": f"arrays/{name}.npy", "bytes": len(data),
                        "sha256": hashlib.sha256(data).hexdigest(), "shape": list(array.shape)}
    network = {name: list(getattr(net, name)) for name in _TEXT_FIELDS}
    network.update(activation=net.activation, task=net.task)
    if net.n_categorical:
        network.update(categorical_names=list(net.categorical_names),
                       categorical_levels=[list(group) for group in net.categorical_levels])
    version = 2 if net.n_categorical else 1  # older tools keep reading bundles they can compute
    return {"format": FORMAT_NAME, "format_version": version, "tool_version": __version__,
            "network": network, "arrays": arrays, "metadata": bundle.metadata}


def to_bytes(bundle: Bundle) -> bytes:
    """The archive's bytes; the same bundle always gives the same bytes."""
    manifest = _manifest(bundle)
    manifest["bundle_id"] = _bundle_id(manifest)
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", compression=zipfile.ZIP_STORED) as archive:
        text = json.dumps(manifest, sort_keys=True, indent=1).encode("ascii") + b"\n"
        entries = [(MANIFEST, text)]
        entries += [(meta["entry"], _npy_bytes(getattr(bundle.network, name)))
                    for name, meta in sorted(manifest["arrays"].items())]
        for entry, data in entries:
            info = zipfile.ZipInfo(entry, date_time=_ZIP_TIME)
            info.create_system = _ZIP_UNIX
            info.external_attr = 0o644 << 16
            archive.writestr(info, data)
    return buffer.getvalue()


def save(bundle: Bundle, path: str | os.PathLike, overwrite: bool = False) -> Path:
    """Write ``bundle`` to ``path`` atomically; refuse to replace a file unless ``overwrite``."""
    return write_atomic(path, to_bytes(bundle), overwrite=overwrite)


def load(path: str | os.PathLike) -> Bundle:
    """Read and check a bundle; raise :class:`BundleError` with a one-line reason if unsound."""
    path = Path(path)
    try:
        status = path.stat()
        if not stat.S_ISREG(status.st_mode):
            raise BundleError(f"{path} is not a regular file")
        if status.st_size > MAX_BUNDLE_BYTES:
            raise BundleError(f"{path} is {status.st_size} bytes, over the bundle size limit "
                              f"{MAX_BUNDLE_BYTES}")
        with path.open("rb") as handle:
            data = handle.read(MAX_BUNDLE_BYTES + 1)
    except OSError as exc:
        raise BundleError(f"cannot read bundle {path}: {exc.strerror or exc}") from None
    return from_bytes(data, str(path))


def from_bytes(data: bytes, label: str = "bundle") -> Bundle:
    """Check and decode the bytes of a bundle; ``label`` names it in error messages."""
    if len(data) > MAX_BUNDLE_BYTES:
        raise BundleError(f"{label} is {len(data)} bytes, over the bundle size limit "
                          f"{MAX_BUNDLE_BYTES}")
    _check_directory_size(data, label)
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            return _read_archive(archive, len(data), label)
    except BundleError:
        raise
    except RecursionError:
        raise BundleError(f"{label}: manifest is nested too deeply") from None
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, OSError, NotImplementedError,
            RuntimeError, UnicodeDecodeError, ValueError, KeyError, TypeError,
            OverflowError) as exc:
        raise BundleError(f"{label} is not a readable bundle: {one_line(exc)}") from None


def _check_directory_size(data: bytes, label: str) -> None:
    """Refuse an archive whose directory is too large before the zip reader builds it in memory."""
    end = data.rfind(b"PK\x05\x06", max(0, len(data) - 22 - 0xFFFF))
    if end < 0 or end + 22 > len(data):
        return  # no end record: the zip reader reports "not a zip file"
    entries = int.from_bytes(data[end + 10 : end + 12], "little")
    directory = int.from_bytes(data[end + 12 : end + 16], "little")
    if entries > MAX_DIRECTORY_ENTRIES or directory > MAX_DIRECTORY_BYTES:
        raise BundleError(f"{label}: archive directory declares {entries} entries in {directory} "
                          f"bytes; a bundle has {len(EXPECTED_ENTRIES)} entries")


def _check_names(archive: zipfile.ZipFile, label: str) -> None:
    names = archive.namelist()
    expected = EXPECTED_ENTRIES | ({LEVEL_ENTRY} if LEVEL_ENTRY in names else set())
    for name in names:
        parts = name.replace("\\", "/").split("/")
        if name.startswith(("/", "\\")) or ".." in parts or ":" in name or "\x00" in name:
            raise BundleError(f"{label}: unsafe entry name {name!r}")
    duplicates = sorted({name for name in names if names.count(name) > 1})
    if duplicates:
        raise BundleError(f"{label}: duplicate entry {duplicates[0]!r}")
    unexpected, missing = set(names) - expected, expected - set(names)
    if unexpected:
        raise BundleError(f"{label}: unexpected entries {sorted(unexpected)}")
    if MANIFEST in missing:
        raise BundleError(f"{label}: no {MANIFEST}; not a nodecast bundle")
    if missing:
        raise BundleError(f"{label}: missing entries {sorted(missing)} (truncated or damaged)")


def _read_entry(archive: zipfile.ZipFile, name: str, limit: int, archive_bytes: int,
                label: str) -> bytes:
    """The bytes of a stored entry, never reading more than ``limit`` + 1 bytes."""
    info = archive.getinfo(name)
    if info.flag_bits & 0x1:
        raise BundleError(f"{label}: entry {name!r} is encrypted")
    if info.compress_type != zipfile.ZIP_STORED:
        raise BundleError(f"{label}: entry {name!r} is compressed; bundles store entries "
                          "uncompressed")
    if info.file_size > limit:
        raise BundleError(f"{label}: entry {name!r} is {info.file_size} bytes, more than the "
                          f"{limit} declared or allowed")
    if info.compress_size != info.file_size or info.header_offset + info.file_size > archive_bytes:
        raise BundleError(f"{label}: entry {name!r} declares {info.file_size} bytes, which the "
                          f"archive ({archive_bytes} bytes) does not hold (truncated or damaged)")
    try:
        with archive.open(info) as handle:
            payload = handle.read(limit + 1)
    except zipfile.BadZipFile as exc:
        raise BundleError(f"{label}: entry {name!r} is damaged ({one_line(exc)})") from None
    if len(payload) > limit:
        raise BundleError(f"{label}: entry {name!r} is larger than declared")
    return payload


def _parse_json(text: bytes, label: str) -> Any:
    def refuse_constant(name):
        raise BundleError(f"{label}: manifest holds {name}, which is not a JSON number")

    def refuse_duplicates(pairs):
        keys = [key for key, _ in pairs]
        if len(set(keys)) != len(keys):
            raise BundleError(f"{label}: manifest repeats a key in one record")
        return dict(pairs)

    return json.loads(text.decode("ascii"), parse_constant=refuse_constant,
                      object_pairs_hook=refuse_duplicates)


def _read_manifest(archive: zipfile.ZipFile, archive_bytes: int, label: str) -> dict:
    raw = _read_entry(archive, MANIFEST, MAX_MANIFEST_BYTES, archive_bytes, label)
    manifest = _parse_json(raw, label)
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT_NAME:
        raise BundleError(f"{label}: manifest does not describe a {FORMAT_NAME}")
    version = manifest.get("format_version")
    if type(version) is not int or not 1 <= version <= FORMAT_VERSION:
        raise BundleError(f"{label}: format version {version!r} is not one this tool reads "
                          f"(1..{FORMAT_VERSION}); upgrade nodecast")
    if manifest.get("bundle_id") != _bundle_id(manifest):
        raise BundleError(f"{label}: manifest does not match its bundle id (changed or damaged)")
    categorical = "categorical_names" in manifest.get("network", {}) if isinstance(
        manifest.get("network"), dict) else False
    if categorical and version < 2:
        raise BundleError(f"{label}: categorical inputs need format version 2, the manifest says "
                          f"{version}")
    array_fields = ARRAY_FIELDS + (("level_weights",) if categorical else ())
    text_fields = _TEXT_FIELDS + (CATEGORICAL_FIELDS if categorical else ())
    problem = check_manifest(manifest, array_fields, text_fields, MAX_BUNDLE_BYTES)
    if problem:
        raise BundleError(f"{label}: {problem}")
    return manifest


def _decode_npy(payload: bytes, shape: list[int], what: str) -> np.ndarray:
    """The float64 array in ``payload``, after checking its header against the manifest."""
    from numpy.lib import format as npy

    stream = io.BytesIO(payload)
    version = npy.read_magic(stream)
    if version not in ((1, 0), (2, 0)):
        raise BundleError(f"{what}: unsupported .npy version {version}")
    read_header = npy.read_array_header_1_0 if version == (1, 0) else npy.read_array_header_2_0
    header_shape, fortran_order, dtype = read_header(stream, max_header_size=MAX_NPY_HEADER_BYTES)
    if dtype != np.dtype("<f8") or fortran_order or list(header_shape) != shape:
        raise BundleError(f"{what}: .npy header says dtype {dtype}, shape {header_shape}"
                          f"{', Fortran order' if fortran_order else ''}; the manifest says "
                          f"little-endian float64, shape {tuple(shape)}, C order")
    count, offset = math.prod(shape), stream.tell()
    if len(payload) - offset != 8 * count:
        raise BundleError(f"{what}: holds {len(payload) - offset} data bytes, its shape needs "
                          f"{8 * count}")
    return np.frombuffer(payload, dtype="<f8", count=count, offset=offset).reshape(shape)


def _read_array(archive: zipfile.ZipFile, name: str, meta: dict, archive_bytes: int,
                label: str) -> np.ndarray:
    payload = _read_entry(archive, meta["entry"], meta["bytes"], archive_bytes, label)
    if len(payload) != meta["bytes"] or hashlib.sha256(payload).hexdigest() != meta["sha256"]:
        raise BundleError(f"{label}: array {name!r} does not match its SHA-256 "
                          "(changed or damaged)")
    return _decode_npy(payload, meta["shape"], f"{label}: array {name!r}")


def _read_archive(archive: zipfile.ZipFile, archive_bytes: int, label: str) -> Bundle:
    _check_names(archive, label)
    manifest = _read_manifest(archive, archive_bytes, label)
    arrays = {name: _read_array(archive, name, meta, archive_bytes, label)
              for name, meta in sorted(manifest["arrays"].items())}
    text = manifest["network"]
    categorical = {name: tuple(map(tuple, text[name]) if name == "categorical_levels" else
                               text[name]) for name in CATEGORICAL_FIELDS if name in text}
    try:
        network = Network(activation=text["activation"], task=text["task"], **arrays, **categorical,
                          **{name: tuple(text[name]) for name in _TEXT_FIELDS})
    except (ValueError, TypeError) as exc:
        raise BundleError(f"{label}: network is inconsistent: {one_line(exc)}") from None
    problem = check_metadata(manifest["metadata"])
    if problem:
        raise BundleError(f"{label}: {problem}")
    return Bundle(network=network, metadata=manifest["metadata"])

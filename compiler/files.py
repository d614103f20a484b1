"""Writing outputs so that an interrupted run never leaves a half-written file or loses an old one.

Every output is first written in full to a hidden temporary file beside it (``.NAME.XXXX.part``),
flushed to disk, then renamed over the destination: a rename within one folder is atomic on POSIX
and Windows, so a reader sees the old file or the new one, never a mix. An exception or Ctrl-C
removes the temporary file; only a hard kill (SIGKILL, power loss) can leave one behind, and the
destination is intact even then. An existing destination is replaced only with ``overwrite``.
"""

from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path

from nodecast.compiler.errors import NodecastError

OVERWRITE_OPTION = "--overwrite"
MAX_ARTIFACT_BYTES = 64 * 2**20  # default ceiling on the total size of one emitted artifact
SIZE_OPTION = "--max-artifact-size"
_SIZE_UNITS = {"": 1, "K": 2**10, "M": 2**20, "G": 2**30}
_SIZE_TEXT = re.compile(r"([0-9]+) ?([kmg]?)(?:i?b)?", re.ASCII | re.IGNORECASE)


def format_size(size: int) -> str:
    """``size`` bytes in the units :func:`parse_size` reads, rounded up (e.g. ``"65M"``)."""
    for unit in ("G", "M", "K"):
        if size >= _SIZE_UNITS[unit]:
            return f"{-(-size // _SIZE_UNITS[unit])}{unit}"
    return str(size)


def parse_size(text: str) -> int:
    """Bytes from text such as ``"500000"``, ``"200K"``, ``"64M"``, ``"2GiB"`` (binary units)."""
    match = _SIZE_TEXT.fullmatch(text.strip())
    if not match:
        raise NodecastError(f"{SIZE_OPTION} takes a size such as 64M or 500K, got {text!r}")
    return int(match.group(1)) * _SIZE_UNITS[match.group(2).upper()]


def check_artifact_size(kind: str, files: dict[str, bytes], limit: int) -> None:
    """Refuse an artifact whose files add up to more than ``limit`` bytes."""
    size = sum(len(data) for data in files.values())
    if size > limit:
        raise NodecastError(f"the {kind} artifact would be {size} bytes ({format_size(size)}), "
                            f"over the limit {format_size(limit)}; pass {SIZE_OPTION} "
                            f"{format_size(size)} (API: max_bytes=) if you mean it")


def refuse_existing(path: Path, overwrite: bool) -> None:
    """Raise unless ``path`` is free or may be replaced; a folder is never replaced by a file."""
    if path.is_dir():
        raise NodecastError(f"{path} is a folder; give a file name")
    if path.exists() and not overwrite:
        raise NodecastError(f"{path} already exists; pass {OVERWRITE_OPTION} to replace it")


def _new_file_mode() -> int:
    """The permissions a plain ``open(path, "w")`` would give (temporary files start as 0600)."""
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


def _stage(path: Path, data: bytes) -> Path:
    """Write ``data`` to a new temporary file beside ``path``; return the temporary file."""
    fd, name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    tmp = Path(name)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.chmod(tmp, _new_file_mode())
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return tmp


def _sync_folder(folder: Path) -> None:
    """Make the renames durable; folders cannot be opened for syncing on every system."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _write_all(paths_and_data: dict[Path, bytes], overwrite: bool) -> list[Path]:
    """Stage every file, then rename them all into place; on any failure remove what was staged."""
    for path in paths_and_data:
        refuse_existing(path, overwrite)
    staged: dict[Path, Path] = {}
    current = next(iter(paths_and_data))
    try:
        for current, data in paths_and_data.items():
            staged[current] = _stage(current, data)
        for current, tmp in staged.items():
            os.replace(tmp, current)
    except OSError as exc:
        raise NodecastError(f"cannot write {current}: {exc.strerror or exc}") from None
    finally:
        for tmp in staged.values():
            tmp.unlink(missing_ok=True)
    for folder in {path.parent for path in staged}:
        _sync_folder(folder)
    return list(paths_and_data)


def write_atomic(path: str | os.PathLike, data: bytes, overwrite: bool = False) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    if not path.parent.is_dir():
        raise NodecastError(f"cannot write {path}: folder {path.parent} does not exist")
    return _write_all({path: data}, overwrite)[0]


def write_files(folder: str | os.PathLike, files: dict[str, bytes],
                overwrite: bool = False) -> list[Path]:
    """Write several files into ``folder`` (created if missing).

    All files are written to temporary files first and renamed into place only when every one of
    them is complete, so an interruption while writing leaves the old set untouched.
    """
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise NodecastError(f"{folder} exists and is not a folder")
    for name in files:
        if Path(name).name != name or name in ("", ".", ".."):
            raise NodecastError(f"refusing to write {name!r}: not a plain file name")
    paths = {folder / name: data for name, data in sorted(files.items())}
    for path in paths:
        refuse_existing(path, overwrite)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise NodecastError(f"cannot create folder {folder}: {exc.strerror or exc}") from None
    return _write_all(paths, overwrite)


def refuse_existing_outputs(overwrite: bool, *paths) -> None:
    """:func:`refuse_existing` for each given output path (None: not asked for), and refuse the
    same path given twice; commands call it before their work so that no run is lost to it."""
    given = [Path(p) for p in paths if p is not None]
    resolved = [p.resolve() for p in given]
    for index, path in enumerate(given):
        if resolved[index] in resolved[:index]:
            raise NodecastError(f"{path} is given as two different outputs; give each its own file")
        refuse_existing(path, overwrite)

"""Writing outputs so that an interrupted run never leaves a half-written file or loses an old one."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from nodecast.compiler.errors import NodecastError


def refuse_existing(path: Path, overwrite: bool) -> None:
    if path.exists() and not overwrite:
        raise NodecastError(f"{path} already exists; pass --overwrite to replace it")


def write_atomic(path: str | os.PathLike, data: bytes, overwrite: bool = False) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    refuse_existing(path, overwrite)
    if not path.parent.is_dir():
        raise NodecastError(f"cannot write {path}: folder {path.parent} does not exist")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def write_files(folder: str | os.PathLike, files: dict[str, bytes], overwrite: bool = False) -> list[Path]:
    """Write several files into ``folder`` (created if missing), each one atomically."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise NodecastError(f"{folder} exists and is not a folder")
    for name in files:
        refuse_existing(folder / name, overwrite)
    folder.mkdir(parents=True, exist_ok=True)
    return [write_atomic(folder / name, data, overwrite=True) for name, data in sorted(files.items())]

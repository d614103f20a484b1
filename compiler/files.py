"""Writing outputs so that an interrupted run never leaves a half-written file or loses an old one.

Every output is first written in full to a hidden temporary file beside it (``.NAME.XXXX.part``),
flushed to disk, then renamed over the destination: a rename within one folder is atomic on POSIX
and Windows, so a reader sees the old file or the new one, never a mix. An exception or Ctrl-C
removes the temporary file; only a hard kill (SIGKILL, power loss) can leave one behind, and the
destination is intact even then. An existing destination is replaced only with ``overwrite``.
"""

from __future__ import annotations

import contextlib
import errno
import os
import re
import shutil
import stat
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


def _kind(mode: int) -> str:
    return ("a FIFO" if stat.S_ISFIFO(mode) else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode)
            else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")


def refuse_existing(path: Path, overwrite: bool) -> Path:
    """Check an output file before any work; return the path to write (a symbolic link's target).

    Refused: a folder, a FIFO, a device or anything else that is not a regular file (even with
    ``overwrite``: replacing ``/dev/null`` or a pipe by a file would break the system), a symbolic
    link to nothing, an existing file without ``overwrite``, a missing folder and a name longer
    than the file system allows. The final write is exclusive all the same (see :func:`write_atomic`).
    """
    path = Path(path)
    try:
        status = path.lstat()
    except FileNotFoundError:
        _check_new_name(path)
        return path
    except OSError as exc:
        if exc.errno == errno.ENAMETOOLONG:
            _check_new_name(path)
        raise NodecastError(f"cannot write {path}: {exc.strerror or exc}") from None
    if stat.S_ISLNK(status.st_mode):
        target = Path(os.path.realpath(path))
        if not target.exists():
            raise NodecastError(f"{path} is a symbolic link to a missing file ({target}); "
                                "remove it or give another name")
        return refuse_existing(target, overwrite)
    if stat.S_ISDIR(status.st_mode):
        raise NodecastError(f"{path} is a folder; give a file name")
    if not stat.S_ISREG(status.st_mode):
        raise NodecastError(f"{path} is {_kind(status.st_mode)}; nodecast writes regular files only "
                            "and never replaces anything else")
    if not overwrite:
        raise NodecastError(f"{path} already exists; pass {OVERWRITE_OPTION} to replace it")
    return path


def _check_new_name(path: Path) -> None:
    if not path.parent.is_dir():
        raise NodecastError(f"cannot write {path}: folder {path.parent} does not exist")
    try:
        limit = os.pathconf(path.parent, "PC_NAME_MAX")
    except (AttributeError, OSError, ValueError):
        limit = 255
    size = len(os.fsencode(path.name))
    if size > limit:
        raise NodecastError(f"cannot write {path.name[:40]}...: the name is {size} bytes, the file "
                            f"system allows {limit}")


def check_outputs(outputs: dict[str, str | None], inputs: dict[str, str | None] | None = None,
                  overwrite: bool = False, folders: tuple[str, ...] = ()) -> None:
    """Before any work: check every output (option -> path) as :func:`refuse_existing` does (the
    options in ``folders`` name folders and are only checked not to clash) and refuse two outputs,
    or an output and an input (what -> path), that are the same file."""
    seen: dict[str, str] = {}
    for what, path in (inputs or {}).items():
        if path is not None:
            seen.setdefault(_identity(path), what)
    for option, path in outputs.items():
        if path is None:
            continue
        key = _identity(path)
        if key in seen:
            raise NodecastError(f"{option} {path} is the same file as {seen[key]}; give another "
                                "name (one file cannot be two things)")
        seen[key] = option
        if option not in folders:
            refuse_existing(Path(path), overwrite)


def _identity(path) -> str:
    """A key equal for two names of one file: device and inode if it exists, else its real path."""
    try:
        status = os.stat(path)
        return f"inode:{status.st_dev}:{status.st_ino}"
    except OSError:
        return "path:" + os.path.normcase(os.path.realpath(path))


def _new_file_mode() -> int:
    """The permissions a plain ``open(path, "w")`` would give (temporary files start as 0600)."""
    return 0o666 & ~_umask()


def _temporary_prefix(name: str) -> str:
    return f".{name[:40]}."  # bounded, so that a long output name still leaves room for the suffix


def _stage(path: Path, data: bytes) -> Path:
    """Write ``data`` to a new temporary file beside ``path``; return the temporary file."""
    fd, name = tempfile.mkstemp(prefix=_temporary_prefix(path.name), suffix=".part", dir=path.parent)
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


def _place(tmp: Path, path: Path, overwrite: bool) -> None:
    """Move a staged file to ``path``: replacing only with ``overwrite``, else by exclusive creation
    (a hard link fails if anything, even a dangling link, holds the name), so that of two runs
    writing one name at once, one is refused instead of silently replaced."""
    if overwrite:
        os.replace(tmp, path)
        return
    try:
        os.link(tmp, path)
    except FileExistsError:
        raise NodecastError(f"{path} already exists (another process just created it); pass "
                            f"{OVERWRITE_OPTION} to replace it") from None
    except OSError as exc:  # a file system without hard links: claim the name, then replace it
        if exc.errno not in (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK):
            raise
        try:
            os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
        except FileExistsError:
            raise NodecastError(f"{path} already exists (another process just created it); pass "
                                f"{OVERWRITE_OPTION} to replace it") from None
        os.replace(tmp, path)
    else:
        tmp.unlink()


def _write_all(paths_and_data: dict[Path, bytes], overwrite: bool) -> list[Path]:
    """Stage every file, then move them all into place; on any failure remove what was staged and
    what this call created."""
    targets = {refuse_existing(path, overwrite): data for path, data in paths_and_data.items()}
    staged: dict[Path, Path] = {}
    created: list[Path] = []
    current = next(iter(targets))
    try:
        for current, data in targets.items():
            staged[current] = _stage(current, data)
        for current, tmp in staged.items():
            existed = overwrite and current.exists()
            _place(tmp, current, overwrite)
            if not existed:
                created.append(current)
    except BaseException as exc:
        if not overwrite:  # all or nothing: take back the files this call created
            for path in created:
                path.unlink(missing_ok=True)
        if isinstance(exc, OSError):
            raise NodecastError(f"cannot write {current}: {exc.strerror or exc}") from None
        raise
    finally:
        for tmp in staged.values():
            tmp.unlink(missing_ok=True)
    for folder in {path.parent for path in staged}:
        _sync_folder(folder)
    return list(paths_and_data)


def write_atomic(path: str | os.PathLike, data: bytes, overwrite: bool = False) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then move it into place (exclusively
    unless ``overwrite``)."""
    return _write_all({Path(path): data}, overwrite)[0]


@contextlib.contextmanager
def _folder_lock(folder: Path):
    """Hold an exclusive advisory lock on ``folder`` (POSIX ``flock``): concurrent nodecast runs
    that write into one folder take turns, so their files never mix."""
    try:
        import fcntl
    except ImportError:  # no flock (Windows): the staged writes still never leave half a file
        yield
        return
    fd = os.open(folder, os.O_RDONLY)
    try:
        fcntl.flock(fd, fcntl.LOCK_EX)
        yield
    finally:
        os.close(fd)  # releases the lock


def write_files(folder: str | os.PathLike, files: dict[str, bytes],
                overwrite: bool = False) -> list[Path]:
    """Write several files into ``folder`` as a whole or not at all.

    A new folder is written as a hidden ``.NAME.XXXX.part`` folder beside it and renamed into place
    in one step. Into an existing folder (kept, with whatever else it holds), every file is staged
    first and moved into place only when all are complete, under a lock on the folder, so two runs
    writing there at once never leave one run's header beside the other's source.
    """
    folder = Path(folder)
    for name in files:
        if Path(name).name != name or name in ("", ".", ".."):
            raise NodecastError(f"refusing to write {name!r}: not a plain file name")
    if folder.is_dir():
        with _folder_lock(folder):
            return _write_all({folder / name: data for name, data in sorted(files.items())},
                              overwrite)
    if folder.exists() or folder.is_symlink():
        raise NodecastError(f"{folder} exists and is not a folder")
    _check_new_name(folder)
    return _write_new_folder(folder, files)


def _write_new_folder(folder: Path, files: dict[str, bytes]) -> list[Path]:
    try:
        stage = Path(tempfile.mkdtemp(prefix=_temporary_prefix(folder.name), suffix=".part",
                                      dir=folder.parent))
    except OSError as exc:
        raise NodecastError(f"cannot create folder {folder}: {exc.strerror or exc}") from None
    try:
        for name, data in sorted(files.items()):
            _stage_named(stage / name, data)
        os.chmod(stage, 0o777 & ~_umask())
        os.rename(stage, folder)  # fails if another run created a non-empty folder meanwhile
    except OSError as exc:
        if exc.errno in (errno.EEXIST, errno.ENOTEMPTY):
            raise NodecastError(f"{folder} already exists (another process just created it); "
                                "write into it again to add or replace files") from None
        raise NodecastError(f"cannot create folder {folder}: {exc.strerror or exc}") from None
    finally:
        if stage.exists():
            shutil.rmtree(stage, ignore_errors=True)
    _sync_folder(folder.parent)
    return [folder / name for name in sorted(files)]


def _stage_named(path: Path, data: bytes) -> None:
    with open(path, "xb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())
    os.chmod(path, _new_file_mode())


def _umask() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return umask


def write_artifact(path, artifact, overwrite: bool = False) -> None:
    """A single-file artifact to ``path`` itself, a multi-file one into the folder ``path``."""
    if artifact.single_file:
        (data,) = artifact.files.values()
        write_atomic(path, data, overwrite=overwrite)
    else:
        write_files(path, artifact.files, overwrite=overwrite)

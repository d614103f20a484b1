"""Nothing lost: an interrupted write leaves the old file whole and no half-written new one, and an
existing output is replaced only with --overwrite."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap

import pytest

from nodecast.compiler import bundle as bundle_io
from nodecast.compiler import files
from nodecast.compiler.errors import NodecastError
from tests.helpers import run_cli


def leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if p.name.endswith(".part"))



class _Boom(Exception):
    pass


def test_exception_half_way_through_the_data_keeps_the_old_file(tmp_path, monkeypatch):
    target = tmp_path / "model.ncast"
    target.write_bytes(b"old model")
    real_fdopen = os.fdopen

    class HalfWriter:
        def __init__(self, handle):
            self.handle = handle

        def __enter__(self):
            return self

        def __exit__(self, *exc):
            self.handle.close()

        def write(self, data):
            self.handle.write(data[: len(data) // 2])
            self.handle.flush()
            raise _Boom("disk pulled out")

    monkeypatch.setattr(files.os, "fdopen", lambda fd, mode: HalfWriter(real_fdopen(fd, mode)))
    with pytest.raises(_Boom):
        files.write_atomic(target, b"new model " * 1000, overwrite=True)
    assert target.read_bytes() == b"old model" and leftovers(tmp_path) == []


@pytest.mark.parametrize("interruption", [KeyboardInterrupt, SystemExit, OSError])
def test_interruption_after_writing_before_rename_keeps_the_old_file(tmp_path, monkeypatch,
                                                                     interruption):
    target = tmp_path / "fan.onnx"
    target.write_bytes(b"old")

    def interrupted_sync(fd):
        raise interruption(28, "No space left on device") if interruption is OSError \
            else interruption()

    monkeypatch.setattr(files.os, "fsync", interrupted_sync)
    expected = NodecastError if interruption is OSError else interruption
    with pytest.raises(expected) as info:
        files.write_atomic(target, b"new", overwrite=True)
    if interruption is OSError:
        assert "cannot write" in str(info.value) and "No space left" in str(info.value)
    assert target.read_bytes() == b"old" and leftovers(tmp_path) == []


def test_multi_file_artifact_is_replaced_all_or_nothing(tmp_path, monkeypatch):
    folder = tmp_path / "c"
    folder.mkdir()
    (folder / "model.c").write_bytes(b"old c")
    (folder / "model.h").write_bytes(b"old h")
    real_stage = files._stage

    def stage_then_fail_on_second(path, data):
        if path.name == "model.h":
            raise KeyboardInterrupt
        return real_stage(path, data)

    monkeypatch.setattr(files, "_stage", stage_then_fail_on_second)
    with pytest.raises(KeyboardInterrupt):
        files.write_files(folder, {"model.c": b"new c", "model.h": b"new h"}, overwrite=True)
    # model.c was staged completely before model.h failed: still, neither file changed
    assert (folder / "model.c").read_bytes() == b"old c"
    assert (folder / "model.h").read_bytes() == b"old h"
    assert leftovers(folder) == []
    monkeypatch.setattr(files, "_stage", real_stage)
    files.write_files(folder, {"model.c": b"new c", "model.h": b"new h"}, overwrite=True)
    assert (folder / "model.h").read_bytes() == b"new h"


def test_existing_outputs_are_refused_without_overwrite(tmp_path):
    target = tmp_path / "m.ncast"
    target.write_bytes(b"keep me")
    with pytest.raises(NodecastError, match="already exists; pass --overwrite to replace it"):
        files.write_atomic(target, b"new")
    folder = tmp_path / "c"
    folder.mkdir()
    (folder / "model.h").write_bytes(b"keep")
    with pytest.raises(NodecastError, match="model.h already exists"):
        files.write_files(folder, {"model.c": b"c", "model.h": b"h"})
    assert not (folder / "model.c").exists()  # refused before writing either file
    assert target.read_bytes() == b"keep me"


def test_bad_destinations_are_clear_errors(tmp_path):
    with pytest.raises(NodecastError, match="is a folder; give a file name"):
        files.write_atomic(tmp_path, b"x", overwrite=True)
    with pytest.raises(NodecastError, match="does not exist"):
        files.write_atomic(tmp_path / "absent" / "m.ncast", b"x")
    (tmp_path / "plain").write_bytes(b"")
    with pytest.raises(NodecastError, match="exists and is not a folder"):
        files.write_files(tmp_path / "plain", {"a.c": b""})
    for name in ("../escape.c", "sub/x.c", ".."):
        with pytest.raises(NodecastError, match="not a plain file name"):
            files.write_files(tmp_path / "out", {name: b""})


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_read_only_folder_is_a_clear_error(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        with pytest.raises(NodecastError, match="cannot write .*Permission denied"):
            files.write_atomic(folder / "m.ncast", b"x")
    finally:
        folder.chmod(0o700)


def test_written_files_get_ordinary_permissions(tmp_path):
    umask = os.umask(0o022)
    try:
        path = files.write_atomic(tmp_path / "m.ncast", b"x")
    finally:
        os.umask(umask)
    assert path.stat().st_mode & 0o777 == 0o644  # what open(path, "w") gives under umask 022


# -- through the command line, in-process and in a killed process ----------------------------------

@pytest.fixture(scope="module")
def bundle_file(tmp_path_factory):
    from tests.compiler.test_bundle_integrity import tiny_bundle

    path = tmp_path_factory.mktemp("bundle") / "tiny.ncast"
    bundle_io.save(tiny_bundle(), path)
    return path


def test_cli_refuses_to_replace_outputs_without_overwrite(bundle_file, tmp_path, capsys):
    existing = tmp_path / "out.onnx"
    existing.write_bytes(b"precious")
    code, _, err = run_cli(capsys, *["emit", bundle_file, "--to", "onnx", "-o", existing])
    assert code == 2 and "pass --overwrite" in err and existing.read_bytes() == b"precious"
    data = tmp_path / "rows.csv"
    data.write_text("x0,x1\n0.5,0.5\n")
    code, _, err = run_cli(capsys, *["predict", bundle_file, data, "-o", existing])
    assert code == 2 and "pass --overwrite" in err and existing.read_bytes() == b"precious"
    code, _, err = run_cli(capsys, *["train", data, "--target", "x1", "-o", existing])
    assert code == 2 and "pass --overwrite" in err and existing.read_bytes() == b"precious"
    code, _, err = run_cli(capsys, *["emit", bundle_file, "--to", "onnx", "-o", existing, "--overwrite"])
    assert code == 0 and existing.read_bytes().startswith(b"\x08")  # protobuf field 1: ir_version


def test_cli_emit_interrupted_mid_write_keeps_the_old_artifact(bundle_file, tmp_path, monkeypatch,
                                                              capsys):
    existing = tmp_path / "out.onnx"
    existing.write_bytes(b"precious")

    def interrupted_sync(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(files.os, "fsync", interrupted_sync)
    code, _, _ = run_cli(capsys, *["emit", bundle_file, "--to", "onnx", "-o", existing, "--overwrite"])
    assert code != 0 and existing.read_bytes() == b"precious" and leftovers(tmp_path) == []


CHILD = textwrap.dedent("""
    import os, sys, time
    from nodecast.compiler import files
    def stall(fd):  # the new bytes are in the temporary file; hold here until killed
        print("staged", flush=True)
        time.sleep(60)
    files.os.fsync = stall
    from nodecast.cli import main
    main(sys.argv[1:])
""")


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGKILL])
@pytest.mark.slow
def test_killed_emit_never_leaves_a_half_written_artifact(bundle_file, tmp_path, sig):
    existing = tmp_path / "out.onnx"
    existing.write_bytes(b"precious")
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, "emit", str(bundle_file), "--to", "onnx", "-o",
         str(existing), "--overwrite"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        assert child.stdout.readline().strip() == "staged"
        child.send_signal(sig)
        child.wait(timeout=60)
    finally:
        child.kill()
        child.communicate()
    assert existing.read_bytes() == b"precious"
    if sig == signal.SIGTERM:  # unwinds: exit 128 + 15 and the temporary file is gone
        assert child.returncode == 143 and leftovers(tmp_path) == []
    else:  # a hard kill cannot clean up; what it leaves is a hidden *.part, never the output
        assert child.returncode == -signal.SIGKILL
        assert all(name.startswith(".out.onnx.") for name in leftovers(tmp_path))

"""Nothing lost, through the command line: every output follows the rule of -o (kept unless
--overwrite, checked before the work), no output may be another output or an input, only regular
files are ever replaced, names are created exclusively, and a multi-file artifact is written whole.
(docs/reliability.md, "Outputs: nothing lost")"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import threading

import numpy as np
import pytest

from nodecast.compiler import files
from nodecast.compiler.bundle import Bundle, save
from nodecast.compiler.ir import Network
from tests.helpers import run_cli

HAS_GCC = shutil.which("gcc") is not None


def network(seed=0, n=2, m=4) -> Network:
    rng = np.random.default_rng(seed)
    return Network(hidden_weights=rng.normal(size=(m, n)), hidden_biases=rng.normal(size=m),
                   activation="logistic", output_weights=rng.normal(size=(m, 1)),
                   output_bias=[0.1], input_offset=np.zeros(n), input_scale=np.ones(n),
                   output_offset=[0.0], output_scale=[1.0], domain_low=np.zeros(n),
                   domain_high=np.ones(n), feature_names=tuple(f"x{i}" for i in range(n)),
                   target_names=("y",))



def one_line_refusal(code, err) -> bool:
    return code == 2 and err.count("\n") == 1 and err.startswith("nodecast: error: ")


@pytest.fixture()
def work(tmp_path):
    save(Bundle(network(), {"seed": 0}), tmp_path / "fan.ncast")
    rows = np.random.default_rng(1).random((40, 2))
    lines = ["x0,x1,y"] + [f"{a!r},{b!r},{a + b * b!r}" for a, b in rows.tolist()]
    (tmp_path / "readings.csv").write_text("\n".join(lines) + "\n")
    return tmp_path


def test_verify_report_may_not_replace_the_bundle_or_an_existing_file(work, capsys):
    bundle = (work / "fan.ncast").read_bytes()
    code, _, _ = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "python", "-o", work / "p.py"])
    assert code == 0
    code, _, err = run_cli(capsys, *["verify", work / "fan.ncast", work / "p.py", "--probes", "16",
                         "--report", work / "fan.ncast"])
    assert one_line_refusal(code, err) and "same file as MODEL" in err
    assert (work / "fan.ncast").read_bytes() == bundle
    (work / "old.json").write_text("keep")
    code, _, err = run_cli(capsys, *["verify", work / "fan.ncast", work / "p.py", "--probes", "16",
                         "--junit", work / "old.json"])
    assert one_line_refusal(code, err) and "--overwrite" in err
    assert (work / "old.json").read_text() == "keep"
    code, _, _ = run_cli(capsys, *["verify", work / "fan.ncast", work / "p.py", "--probes", "16",
                       "--junit", work / "old.json", "--overwrite"])
    assert code == 0 and (work / "old.json").read_text().startswith("<?xml")


def test_score_junit_may_not_replace_the_data(work, capsys):
    data = (work / "readings.csv").read_bytes()
    code, _, err = run_cli(capsys, *["score", work / "fan.ncast", work / "readings.csv", "--junit",
                         work / "readings.csv"])
    assert one_line_refusal(code, err) and "same file as DATA" in err
    assert (work / "readings.csv").read_bytes() == data
    code, _, err = run_cli(capsys, *["score", work / "fan.ncast", work / "readings.csv", "--report",
                         work / "r.json", "--junit", work / "r.json"])
    assert one_line_refusal(code, err) and "same file as --report" in err
    assert not (work / "r.json").exists()


def test_select_refuses_one_file_for_two_outputs_before_the_search(work, capsys, monkeypatch):
    from nodecast.trainer import selection_run

    monkeypatch.setattr(selection_run, "run_selection", lambda *a, **k: pytest.fail("searched"))
    code, _, err = run_cli(capsys, *["select", work / "readings.csv", "--target", "y", "-o", work / "s.ncast",
                         "--report", work / "s.ncast"])
    assert one_line_refusal(code, err) and "same file as -o" in err
    (work / "cv.json").write_text("keep")
    code, _, err = run_cli(capsys, *["select", work / "readings.csv", "--target", "y", "-o", work / "s.ncast",
                         "--report", work / "cv.json"])
    assert one_line_refusal(code, err) and "cv.json already exists" in err
    assert (work / "cv.json").read_text() == "keep" and not (work / "s.ncast").exists()


def test_train_checks_the_output_before_training(work, capsys, monkeypatch):
    from nodecast.trainer import training

    monkeypatch.setattr(training, "train", lambda *a, **k: pytest.fail("trained"))
    code, _, err = run_cli(capsys, *["train", work / "readings.csv", "--target", "y", "-o",
                         work / "missing" / "x.ncast"])
    assert one_line_refusal(code, err) and "does not exist" in err
    code, _, err = run_cli(capsys, *["train", work / "readings.csv", "--target", "y", "-o",
                         work / ("n" * 300 + ".ncast")])
    assert one_line_refusal(code, err) and "the file system allows 255" in err
    code, _, err = run_cli(capsys, *["train", work / "readings.csv", "--target", "y", "-o",
                         work / "readings.csv", "--overwrite"])
    assert one_line_refusal(code, err) and "same file as DATA" in err


def test_a_long_output_name_within_the_limit_is_written(work, capsys):
    name = "n" * 248 + ".ncast"  # 254 bytes: fits; the temporary name must fit as well
    code, _, err = run_cli(capsys, *["train", work / "readings.csv", "--target", "y", "--nodes", "5",
                         "-o", work / name])
    assert code == 0, err
    assert (work / name).stat().st_size > 0
    assert [p.name for p in work.iterdir() if p.name.endswith(".part")] == []


@pytest.mark.parametrize("overwrite", [[], ["--overwrite"]])
def test_dangling_symlink_at_the_output_is_refused(work, capsys, overwrite):
    link = work / "out.onnx"
    link.symlink_to(work / "nowhere" / "target.onnx")
    code, _, err = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "onnx", "-o", link, *overwrite])
    assert one_line_refusal(code, err) and "symbolic link to a missing file" in err
    assert link.is_symlink() and not (work / "nowhere").exists()


def test_symlink_to_a_file_is_written_through_with_overwrite(work, capsys):
    (work / "real.onnx").write_bytes(b"old")
    (work / "link.onnx").symlink_to(work / "real.onnx")
    code, _, err = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "onnx", "-o", work / "link.onnx"])
    assert one_line_refusal(code, err) and (work / "real.onnx").read_bytes() == b"old"
    code, _, _ = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "onnx", "-o", work / "link.onnx",
                       "--overwrite"])
    assert code == 0 and (work / "link.onnx").is_symlink()
    assert (work / "real.onnx").read_bytes().startswith(b"\x08")


def test_fifo_at_the_output_is_never_replaced(work, capsys):
    fifo = work / "pipe.csv"
    os.mkfifo(fifo)
    code, _, err = run_cli(capsys, *["predict", work / "fan.ncast", work / "readings.csv", "-o", fifo,
                         "--overwrite"])
    assert one_line_refusal(code, err) and "is a FIFO" in err
    assert fifo.is_fifo()


def test_character_device_is_refused_even_with_overwrite(work, capsys):
    """On a device node of our own, never the system's /dev/null (a tool that replaced it, as
    nodecast once did, would break the machine for everyone)."""
    import stat

    device = work / "null"
    try:
        os.mknod(device, stat.S_IFCHR | 0o666, os.makedev(1, 3))
    except (PermissionError, OSError):
        pytest.skip("cannot make a device node here (needs root)")
    code, _, err = run_cli(capsys, *["predict", work / "fan.ncast", work / "readings.csv", "-o", device,
                         "--overwrite"])
    assert one_line_refusal(code, err) and "is a device" in err
    assert stat.S_ISCHR(device.lstat().st_mode)


def test_two_writers_of_one_name_at_once_one_is_refused(tmp_path, monkeypatch):
    """Both pass the early check; both have staged their bytes; exclusive creation refuses one."""
    barrier = threading.Barrier(2, timeout=30)
    real_stage = files._stage

    def stage_together(path, data):
        tmp = real_stage(path, data)
        barrier.wait()
        return tmp

    monkeypatch.setattr(files, "_stage", stage_together)
    outcomes = []

    def write(data):
        try:
            files.write_atomic(tmp_path / "fan.onnx", data)
            outcomes.append(("ok", data))
        except files.NodecastError as exc:
            outcomes.append(("refused", str(exc)))

    threads = [threading.Thread(target=write, args=(data,)) for data in (b"first", b"second")]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert sorted(kind for kind, _ in outcomes) == ["ok", "refused"]
    winner = next(data for kind, data in outcomes if kind == "ok")
    assert (tmp_path / "fan.onnx").read_bytes() == winner
    assert [p.name for p in tmp_path.iterdir()] == ["fan.onnx"]


@pytest.mark.slow
def test_concurrent_multi_file_writes_never_mix(tmp_path, monkeypatch):
    """Two runs writing header and source into one folder at once, slowed between their renames:
    the folder always ends up with one run's pair."""
    import time

    real_replace = os.replace

    def slow_replace(src, dst):
        real_replace(src, dst)
        time.sleep(0.002)

    monkeypatch.setattr(files.os, "replace", slow_replace)
    folder = tmp_path / "c"
    folder.mkdir()
    for round_ in range(40):
        runs = [{"m.h": f"{round_}-{who}".encode(), "m.c": f"{round_}-{who}".encode()}
                for who in "ab"]
        threads = [threading.Thread(target=files.write_files, args=(folder, run),
                                    kwargs={"overwrite": True}) for run in runs]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        assert (folder / "m.h").read_bytes() == (folder / "m.c").read_bytes()


def test_a_new_artifact_folder_appears_whole(tmp_path, monkeypatch):
    """A new folder is written hidden and renamed into place: an interruption leaves no folder."""
    real_stage = files._stage_named

    def fail_on_second(path, data):
        if path.name == "m.h":
            raise KeyboardInterrupt
        real_stage(path, data)

    monkeypatch.setattr(files, "_stage_named", fail_on_second)
    with pytest.raises(KeyboardInterrupt):
        files.write_files(tmp_path / "out", {"m.c": b"c", "m.h": b"h"})
    assert list(tmp_path.iterdir()) == []


@pytest.mark.skipif(not HAS_GCC, reason="needs gcc to emit C with a footprint")
@pytest.mark.slow
def test_concurrent_c_emits_through_the_cli(work):
    """Two emit processes into one new folder without --overwrite: one writes it, one is refused;
    the folder holds one run's header and source."""
    save(Bundle(network(seed=5), {"seed": 5}), work / "other.ncast")
    for round_ in range(3):
        out = work / f"c{round_}"
        procs = [subprocess.Popen([sys.executable, "-m", "nodecast.cli", "emit",
                                   str(work / name), "--to", "c", "--prefix", "model", "-o", str(out)],
                                  stderr=subprocess.PIPE, text=True)
                 for name in ("fan.ncast", "other.ncast")]
        codes = [(p.wait(timeout=300), p.stderr.read()) for p in procs]
        assert sorted(code for code, _ in codes) == [0, 2], codes
        header, source = (out / "model.h").read_text(), (out / "model.c").read_text()
        bundle_id = header.split("#define MODEL_BUNDLE_ID ")[1].split()[0].strip('"')
        assert bundle_id in source


def test_c_prefix_clashing_with_the_board_file_is_refused(work, capsys):
    code, _, err = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "c", "--prefix", "startup",
                         "--bare-metal", "-o", work / "c"])
    assert one_line_refusal(code, err) and "startup.c" in err and not (work / "c").exists()
    code, _, err = run_cli(capsys, *["emit", work / "fan.ncast", "--to", "c", "--prefix", "_", "-o",
                         work / "c"])
    assert one_line_refusal(code, err) and "reserved identifiers" in err


def test_demo_keeps_the_users_files_without_overwrite(tmp_path, capsys):
    (tmp_path / "readings.csv").write_text("mine\n")
    code, _, err = run_cli(capsys, *["demo", "-o", tmp_path, "--data-only"])
    assert one_line_refusal(code, err) and "readings.csv already exists" in err
    assert (tmp_path / "readings.csv").read_text() == "mine\n"
    code, _, _ = run_cli(capsys, *["demo", "-o", tmp_path, "--data-only", "--overwrite"])
    assert code == 0 and (tmp_path / "readings.csv").read_text().startswith("ambient_temp,")

"""Long steps (issue 19): a warning for more nodes than rows, rows outside a declared domain counted,
progress with time left, and Ctrl-C that stops a long fit at once with status 130."""

from __future__ import annotations

import io
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from nodecast.cli.progress import Progress, run_interruptible
from tests.helpers import run_cli, write_csv


@pytest.fixture
def rows40(tmp_path):
    rng = np.random.default_rng(5)
    X = rng.random((40, 2))
    return write_csv(tmp_path / "d.csv", ["a", "b", "y"],
                     [(float(a), float(b), float(a * b + b)) for a, b in X])


@pytest.mark.slow
def test_more_nodes_than_rows_warns_before_training(capsys, rows40, tmp_path):
    code, _, err = run_cli(capsys, "train", rows40, "--target", "y", "--nodes", "80",
                        "-o", tmp_path / "m.ncast")
    assert code == 0
    lines = err.strip().splitlines()
    assert lines[0].startswith("nodecast: warning: 80 nodes for 40 rows") and "select" in lines[0]
    assert lines[-1].startswith("wrote ")  # the warning comes first, the result last
    # the default M is ours to choose: no warning for it, even on 40 rows
    code, _, err = run_cli(capsys, "train", rows40, "--target", "y", "-o", tmp_path / "d.ncast")
    assert code == 0 and "warning" not in err


@pytest.mark.slow
def test_rows_outside_a_declared_domain_are_counted(capsys, rows40, tmp_path):
    a = np.loadtxt(rows40, delimiter=",", skiprows=1)[:, 0]
    expected = int(np.sum((a < 0.2) | (a > 0.7)))
    assert expected > 0
    code, _, err = run_cli(capsys, "train", rows40, "--target", "y", "--domain", "a=0.2:0.7",
                        "-o", tmp_path / "m.ncast")
    assert code == 0
    assert f"warning: {expected} of 40 training rows lie outside the declared --domain" in err
    code, _, err = run_cli(capsys, "train", rows40, "--target", "y", "--domain", "a=0:1",
                        "-o", tmp_path / "all.ncast")
    assert code == 0 and "warning" not in err


def test_progress_line_counts_time_left_and_admits_an_overrun():
    stream = io.StringIO()
    progress = Progress("train", stream=stream)
    progress.stage("fitting", estimate=65.0, since=time.monotonic() - 5.0)
    assert progress.line() == "train: fitting, 0:05 elapsed, about 1:00 left"
    progress.stage("fitting", estimate=10.0, since=time.monotonic() - 20.0)
    assert progress.line() == "train: fitting, 0:20 elapsed, longer than the estimate of 0:10"
    progress.stage("drawing probes")
    assert progress.line() == "train: drawing probes, 0:00 elapsed"


def test_a_pass_over_the_rows_shows_rows_rate_and_time_left():
    # the streamed and cluster passes report through the same line as every other stage
    progress = Progress("train", stream=io.StringIO())
    began = time.monotonic() - 2.0
    meter = progress.passes(clock=lambda: began)
    meter.start("factor", 1000)
    meter.advance(250)
    assert progress.line() == "train: factor: 250 rows of 1,000, 125 rows/s, about 0:06 left, 0:02 elapsed"
    meter.start("counting", None)
    meter.advance(40)
    assert progress.line().startswith("train: counting: 40 rows, ")
    assert progress.line().endswith(" rows/s, 0:02 elapsed")  # no total: no time left


@pytest.mark.slow
def test_progress_is_printed_for_a_step_expected_to_be_long():
    stream = io.StringIO()
    with Progress("select", stream=stream, interval=0.2) as progress:
        progress.stage("2 of 9 (fold, k, s) units done", estimate=60.0)
        progress.start()
        time.sleep(1.5)
    assert "select: 2 of 9 (fold, k, s) units done, 0:0" in stream.getvalue()
    assert "left" in stream.getvalue()


def test_select_reports_units_then_the_final_refit():
    from nodecast.cli.select import UnitClock

    class Recorder:
        def __init__(self):
            self.stages = []

        def stage(self, text, estimate=None, since=None):
            self.stages.append((text, estimate))

    recorder = Recorder()
    clock = UnitClock(recorder, rows=500, max_nodes=200, folds=5, grow=False)
    clock(1, 4)
    clock(4, 4)
    (start, _), (units, estimate), (refit, refit_estimate) = recorder.stages
    assert start == "cross-validating the grid"
    assert units == "1 of 4 (fold, k, s) units done" and estimate > 0
    assert refit == "refitting the choice on all rows" and refit_estimate > 0


def test_verify_tells_each_runtime_engine_before_it_runs(friedman_bundle, tmp_path):
    from nodecast.compiler import emit
    from nodecast.compiler.verify import verify

    emit(friedman_bundle, "onnx", tmp_path / "m.onnx")
    told = []
    verify(friedman_bundle, tmp_path / "m.onnx", count=64,
           on_engine=lambda engine, index, total, rows: told.append((engine, index, total)))
    assert [t[1] for t in told] == list(range(len(told))) and len(told) >= 2
    assert all(t[2] == len(told) for t in told)


def test_run_interruptible_returns_results_and_raises_errors_of_the_child():
    from nodecast.compiler.errors import NodecastError

    calls = []
    assert run_interruptible(lambda x, tell: (tell("half"), x * 2)[1], 21, callback=calls.append) == 42
    assert calls == ["half"]

    def fails():
        raise NodecastError("bad input, one line")

    with pytest.raises(NodecastError, match="bad input, one line"):
        run_interruptible(fails)


@pytest.mark.skipif(not hasattr(os, "fork"), reason="prompt Ctrl-C needs fork")
@pytest.mark.slow
def test_ctrl_c_stops_a_long_fit_at_once_with_status_130(tmp_path):
    from nodecast.cli.demo_scenario import write_data

    write_data(tmp_path)
    lines = (tmp_path / "readings.csv").read_text().splitlines()[:601]
    (tmp_path / "r.csv").write_text("\n".join(lines) + "\n")
    out = tmp_path / "big.ncast"
    # 3000 nodes on 600 rows takes minutes; the progress line says the fit has started
    child = subprocess.Popen([sys.executable, "-m", "nodecast.cli", "train",
                              str(tmp_path / "r.csv"), "--target", "heatsink_temp", "--nodes",
                              "3000", "-o", str(out)], stderr=subprocess.PIPE, text=True)
    seen = []
    for line in child.stderr:
        seen.append(line)
        if line.startswith("train: fitting on all rows"):
            break
    child.send_signal(signal.SIGINT)
    try:
        # the bound is generous (the machine may be loaded); before the fix the fit ran on for
        # minutes inside LAPACK, deaf to Ctrl-C
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
    rest = child.stderr.read()
    assert child.returncode == 130, seen + [rest]
    assert rest.strip().splitlines()[-1] == "nodecast: interrupted"
    assert not out.exists() and not [p for p in os.listdir(tmp_path) if p.endswith(".part")]


def test_the_progress_line_on_a_terminal_erases_its_tail_with_a_real_escape(monkeypatch):
    # the CLI writes stderr through EscapingStream (hostile text is shown, never obeyed); the
    # progress line's own erase-to-end-of-line must still reach the terminal as ESC [ K, not as
    # the six characters "\x1b[K" after every redraw, while text in the line stays escaped
    from nodecast.cli import progress as progress_module
    from nodecast.cli.terminal import EscapingStream

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    terminal = Terminal()
    monkeypatch.setattr(progress_module, "QUIET_SECONDS", 0.0)
    with Progress("train", stream=EscapingStream(terminal), interval=0.05) as progress:
        progress.stage("factor: rows of \x1b]0;pwned\x07")
        progress.start()
        time.sleep(0.5)
    shown = terminal.getvalue()
    assert "\rtrain: factor: rows of \\x1b]0;pwned\\x07" in shown
    assert "\x1b[K" in shown and "\\x1b[K" not in shown
    assert "\x1b]" not in shown and "\x07" not in shown

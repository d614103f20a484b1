"""Long steps: progress with time left on stderr, and a prompt stop on Ctrl-C.

:class:`Progress` prints the current stage, the time spent and an estimate of the time left, once the
command has run (or a stage is expected to run) longer than ``QUIET_SECONDS``: on a terminal one line
rewritten every second, elsewhere (CI logs) a line every ``LOG_INTERVAL`` seconds. Estimates are
estimates: when a stage outlives its estimate the line says so instead of counting below zero.

:func:`run_interruptible` runs a long computation in a forked child process so that Ctrl-C is seen
within a fraction of a second even while the computation sits in one long LAPACK call that holds
the interpreter lock (Python handles a signal only between bytecodes of the main thread). On Ctrl-C
the parent kills the child and the command ends with one line and status 130; nothing has been
written by then, because commands write their outputs (atomically, see
:mod:`nodecast.compiler.files`) only after the computation returns.
"""

from __future__ import annotations

import os
import sys
import threading
import time

from nodecast.cli.terminal import EscapingStream, printable

QUIET_SECONDS = 3.0
LOG_INTERVAL = 15.0


def format_seconds(seconds: float) -> str:
    seconds = int(round(max(seconds, 0.0)))
    hours, rest = divmod(seconds, 3600)
    return f"{hours}:{rest // 60:02d}:{rest % 60:02d}" if hours else f"{rest // 60}:{rest % 60:02d}"


class Progress:
    """Stage-by-stage progress of one command (a context manager that stops its ticker thread)."""

    def __init__(self, command: str, stream=None, interval: float | None = None):
        self.command, self.stream = command, stream or sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.interval = interval or (1.0 if self.tty else LOG_INTERVAL)
        self.text, self.estimate, self.started = "", None, time.monotonic()
        self.began = self.started  # the command's start
        self._stop, self._lock, self._shown = threading.Event(), threading.Lock(), False
        self._thread = threading.Thread(target=self._tick, daemon=True)

    def __enter__(self) -> Progress:
        return self

    def start(self) -> None:
        """Start printing (after any fork: a child must not inherit a thread mid-write)."""
        if not self._thread.is_alive():
            self._thread.start()

    def __exit__(self, *exc) -> None:
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join()
        if self._shown and self.tty:
            self.stream.write("\n")
            self.stream.flush()

    def stage(self, text: str, estimate: float | None = None, since: float | None = None) -> None:
        """Start a stage; ``estimate`` is its expected duration in seconds (None: unknown), counted
        from ``since`` (a time.monotonic() value; default now)."""
        with self._lock:
            self.text, self.estimate = text, estimate
            self.started = time.monotonic() if since is None else since

    def passes(self, clock=time.monotonic):
        """A :class:`~nodecast.trainer.progress.PassProgress` for the streamed and cluster passes:
        each pass shows as a stage with its rows done, their rate and the time left at that rate."""
        from nodecast.trainer.progress import PassProgress

        return PassProgress(self.rows, clock)

    def rows(self, what: str, done: int, total: int | None, started: float) -> None:
        """Show a pass over the rows, started at ``started`` (time.monotonic), ``done`` rows of
        ``total`` (None: not known) read so far."""
        spent = time.monotonic() - started
        text = f"{what}: {done:,} rows" + (f" of {total:,}" if total else "")
        if done and spent > 0:
            text += f", {done / spent:,.0f} rows/s"
            if total:  # at the rate so far (the estimate of a stage would be stale by the redraw)
                text += f", about {format_seconds((total - done) * spent / done)} left"
        self.stage(text, since=started)

    def line(self) -> str:
        with self._lock:
            elapsed, estimate, text = time.monotonic() - self.started, self.estimate, self.text
        parts = [f"{self.command}: {text}", f"{format_seconds(elapsed)} elapsed"]
        if estimate is not None:
            parts.append(f"about {format_seconds(estimate - elapsed)} left" if elapsed < estimate
                         else f"longer than the estimate of {format_seconds(estimate)}")
        return ", ".join(parts)

    def _due(self) -> bool:
        with self._lock:
            now = time.monotonic()
            elapsed, expected = now - self.started, self.estimate or 0.0
        return now - self.began >= QUIET_SECONDS or (expected >= QUIET_SECONDS and elapsed >= 0.5)

    def _tick(self) -> None:
        while not self._stop.wait(min(self.interval, 0.5) if not self._shown else self.interval):
            if self._due():
                self._shown = True
                text = self.line()
                if self.tty:  # the text escaped, the erase-to-end-of-line sent as the escape it is
                    _raw(self.stream).write(f"\r{printable(text)}\x1b[K")
                else:
                    self.stream.write(text + "\n")
                self.stream.flush()


def _raw(stream):
    """The stream under the CLI's :class:`~nodecast.cli.terminal.EscapingStream`, if any (which
    would print the progress line's own escape as the text "\\x1b[K")."""
    return stream._stream if isinstance(stream, EscapingStream) else stream


def cluster_stage(cluster: str | None) -> str:
    """The first stage of a streamed (``cluster`` None) or cluster run."""
    if not cluster:
        return "reading"
    return "starting a local Dask cluster" if cluster.startswith("local") else \
        f"connecting to the Dask scheduler at {cluster}"


class EngineClock:
    """verify's ``on_engine`` callback: which runtime runs, and time left from the pace of the
    engines before it (the first one's time is unknown: elapsed only)."""

    def __init__(self, progress: Progress):
        self.progress, self.started = progress, time.monotonic()

    def __call__(self, engine: str, index: int, total: int, rows: int) -> None:
        spent = time.monotonic() - self.started
        estimate = spent / index * total if index else None
        self.progress.stage(f"running {engine} ({index + 1} of {total}) on {rows} probes",
                            estimate, since=self.started)


def run_interruptible(fn, *args, callback=None, progress: Progress | None = None):
    """``fn(*args)`` (with a relay of ``callback`` as its last argument when one is given), stoppable
    by Ctrl-C within a fraction of a second (module doc); ``progress`` is started once the work runs.
    Where ``fork`` is unavailable, or off the main thread, it runs here and Ctrl-C is seen when the
    current library call returns."""
    extra = () if callback is None else (callback,)
    if threading.current_thread() is not threading.main_thread() or not hasattr(os, "fork"):
        if progress is not None:
            progress.start()
        return fn(*args, *extra)
    import multiprocessing

    context = multiprocessing.get_context("fork")
    receiver, sender = context.Pipe(duplex=False)
    child = context.Process(target=_child, args=(sender, fn, args, callback is not None), daemon=True)
    child.start()
    sender.close()
    if progress is not None:
        progress.start()
    try:
        return _serve(receiver, child, callback)
    finally:
        if child.is_alive():  # Ctrl-C, SIGTERM, or an error here: stop the computation now
            child.kill()
        child.join()
        receiver.close()


def _serve(receiver, child, callback):
    while True:
        if not receiver.poll(0.1):
            if not child.is_alive() and not receiver.poll(0):
                raise RuntimeError(f"the computation ended without a result (exit status "
                                   f"{child.exitcode}); out of memory?")
            continue
        kind, payload = receiver.recv()
        if kind == "call":
            callback(*payload)
        elif kind == "error":
            raise payload
        else:
            return payload


def _child(sender, fn, args, relay: bool) -> None:
    import signal
    import traceback

    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent decides what Ctrl-C does
    status = 0
    try:
        extra = ((lambda *values: sender.send(("call", values))),) if relay else ()
        message = ("result", fn(*args, *extra))
    except BaseException as exc:
        message, status = ("error", exc), 1
        try:
            sender.send(message)
            message = None
        except Exception:  # an exception that does not pickle: send its text
            message = ("error", RuntimeError("".join(traceback.format_exception(exc))))
    try:
        if message is not None:
            sender.send(message)
        sender.close()
    finally:
        os._exit(status)  # no atexit handlers of the parent (a test runner, say) in the child

"""How far a pass over the rows has come, handed to whoever shows it.

The streamed and cluster passes count the rows they have read; each count goes to
``report(what, rows, total, started)`` (``total`` None where unknown, ``started`` the pass's start
on ``time.monotonic``'s clock). The command line renders it (:meth:`nodecast.cli.progress.Progress.passes`):
the library itself never writes to a terminal.
"""

from __future__ import annotations

import time
from collections.abc import Callable


class PassProgress:
    """Rows done in the current pass; no ``report``: nothing is reported."""

    def __init__(self, report: Callable | None = None, clock: Callable[[], float] = time.monotonic):
        self.report, self.clock = report, clock
        self.what, self.total, self.rows, self.started = "", None, 0, 0.0

    def start(self, what: str, total: int | None) -> None:
        """A new pass over ``total`` rows (None: not known yet)."""
        self.what, self.total, self.rows, self.started = what, total, 0, self.clock()
        self._send()

    def advance(self, rows: int) -> None:
        self.rows += rows
        self._send()

    def _send(self) -> None:
        if self.report is not None:
            self.report(self.what, self.rows, self.total, self.started)

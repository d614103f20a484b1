"""Progress of long passes on a terminal: rows done, rate and, where the total is known, time left.

Writes one self-overwriting line to a text stream (stderr of a terminal); does nothing when given
no stream, so that logs and pipes stay clean.
"""

from __future__ import annotations

import time

_EVERY = 0.5  # seconds between redraws


class Progress:
    def __init__(self, stream, clock=time.monotonic) -> None:
        self.stream, self.clock = stream, clock
        self.what, self.total, self.rows, self.shown = "", None, 0, False

    def start(self, what: str, total: int | None) -> None:
        self.done()
        self.what, self.total, self.rows = what, total, 0
        self.began = self.last = self.clock()

    def advance(self, rows: int) -> None:
        self.rows += rows
        now = self.clock()
        if self.stream is not None and now - self.last >= _EVERY:
            self.last = now
            self._draw(now)

    def line(self, now: float) -> str:
        rate = self.rows / max(now - self.began, 1e-9)
        text = f"{self.what}: {self.rows:,} rows"
        if self.total:
            text += f" of {self.total:,}"
        text += f", {rate:,.0f} rows/s"
        if self.total and rate > 0 and self.rows < self.total:
            text += f", {(self.total - self.rows) / rate:,.0f} s left"
        return text

    def _draw(self, now: float) -> None:
        self.stream.write("\r" + self.line(now) + "\x1b[K")
        self.stream.flush()
        self.shown = True

    def done(self) -> None:
        if self.shown:
            self._draw(self.clock())
            self.stream.write("\n")
            self.stream.flush()
            self.shown = False

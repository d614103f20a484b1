"""How long a fit takes, roughly: for progress lines and warnings, never for a decision.

A fit's work grows as M^3 + N M^2 (N rows, M nodes: the blocked QR of the N x M hidden design,
then the SVD and the solves of the ridge choice on the M x M factor). ``SECONDS_PER_UNIT`` was
measured with ``nodecast train`` (ridge auto) on the development machine, a shared 2-core host
under load: 500 rows x 800 nodes 4.6 s, 2000 x 800 5.4 s, 300 x 1200 6.6 s, 500 x 1500 about
19 s of CPU. Each finished fit re-calibrates the rate for the stages after it.
"""

from __future__ import annotations

import time

SECONDS_PER_UNIT = 4e-9


def fit_units(rows: int, nodes: int) -> float:
    return float(nodes) ** 3 + float(rows) * float(nodes) ** 2


def fit_seconds(rows: int, nodes: int, rate: float = SECONDS_PER_UNIT) -> float:
    return rate * fit_units(rows, nodes)


class FitClock:
    """A ``training.train`` stage callback that feeds a :class:`~nodecast.cli.progress.Progress`
    with estimates, re-calibrating the rate from each finished fit."""

    def __init__(self, progress, nodes: int, on_start=None):
        self.progress, self.nodes, self.rate = progress, nodes, SECONDS_PER_UNIT
        self.on_start = on_start  # None or callable(nodes, rows), before the first fit
        self._last: tuple[float, int] | None = None

    def __call__(self, text: str, rows: int) -> None:
        now = time.monotonic()
        if self._last is None and self.on_start is not None:
            self.on_start(self.nodes, rows)
        if self._last is not None:
            started, last_rows = self._last
            self.rate = max(now - started, 1e-6) / fit_units(last_rows, self.nodes)
        self._last = (now, rows)
        self.progress.stage(f"{text} ({self.nodes} nodes, {rows} rows)",
                            fit_seconds(rows, self.nodes, self.rate))

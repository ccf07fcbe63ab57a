"""One progress line for a batch on stderr: pairs done, failures, rate, time left."""

from __future__ import annotations

import sys
import time
from typing import TextIO


#: No rate or time left is shown before this much time has passed.
ESTIMATE_AFTER_S = 2.0


class BatchProgress:
    """A single self-overwriting status line, drawn only when ``stream`` is a terminal.

    Parameters
    ----------
    total : int
        Pairs to run (not counting pairs reused from an earlier run).
    stream : file, optional
        Default ``sys.stderr``.
    enabled : bool, optional
        Default: ``stream.isatty()``.
    """

    def __init__(self, total: int, stream: TextIO | None = None, enabled: bool | None = None,
                 width: int = 24) -> None:
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.total = total
        self.width = width
        self.done = 0
        self.failed = 0
        self.started = time.monotonic()
        self._last = 0.0
        self._drawn = False

    def update(self, done: int, failed: int) -> None:
        """Record progress; redraw at most ten times a second (and at the end)."""
        self.done, self.failed = done, failed
        now = time.monotonic()
        if self.enabled and (now - self._last >= 0.1 or done >= self.total):
            self._last = now
            self._draw(now)

    def _draw(self, now: float) -> None:
        frac = self.done / self.total if self.total else 1.0
        filled = int(round(frac * self.width))
        bar = "#" * filled + "-" * (self.width - filled)
        elapsed = now - self.started
        if elapsed < ESTIMATE_AFTER_S or self.done == 0:
            # too little seen to extrapolate: the first pairs finish in a burst
            speed = ", estimating time left"
        else:
            rate = self.done / elapsed
            left = (self.total - self.done) / rate
            speed = f", {rate:.1f} pairs/s" + (f", {left:.0f} s left"
                                                if self.done < self.total else "")
        text = f"[{bar}] {self.done}/{self.total} pairs, {self.failed} failed{speed}"
        self.stream.write("\r" + text + "\033[K")
        self.stream.flush()
        self._drawn = True

    def log(self, message: str) -> None:
        """Print one line above the bar (or just the line when no bar is drawn)."""
        if self._drawn:
            self.stream.write("\r\033[K")
        self.stream.write(message + "\n")
        self.stream.flush()
        if self._drawn:
            self._draw(time.monotonic())

    def close(self) -> None:
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False

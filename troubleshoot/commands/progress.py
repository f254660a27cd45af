"""Progress messages for long work, on standard error, only once the work has run a while."""

from __future__ import annotations

import math
import sys
import time


class Progress:
    """Call with a short message; shown at most every ``interval`` s after ``delay`` s.

    On a terminal the line is rewritten in place; elsewhere each message is a line.
    """

    def __init__(self, stream=None, delay: float = 1.0, interval: float = 0.5):
        self.stream = stream or sys.stderr
        self.start = time.monotonic()
        self.delay, self.interval = delay, interval
        self.last = -math.inf
        self.shown = False
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()

    def __call__(self, message: str) -> None:
        now = time.monotonic()
        if now - self.start < self.delay or now - self.last < self.interval:
            return
        self.last = now
        self.shown = True
        if self.tty:
            self.stream.write(f"\r\033[K{message}")
        else:
            self.stream.write(message + "\n")
        self.stream.flush()

    def done(self) -> None:
        if self.shown and self.tty:
            self.stream.write("\r\033[K")
            self.stream.flush()

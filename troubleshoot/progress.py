"""One progress display for every long job, on standard error.

Long work in the core takes a plain callback (``progress("message")`` or
``progress(done, total)``) and never prints; the shell passes a
:class:`ProgressDisplay`, which draws a live line with `rich` at a terminal and
writes an occasional plain line otherwise (a log file or CI keeps a trace
without a wall of redraws). Standard output stays free for the result.
"""

from __future__ import annotations

import sys
import time
from typing import TextIO

from rich.console import Console
from rich.progress import (
    BarColumn,
    MofNCompleteColumn,
    Progress,
    SpinnerColumn,
    TaskID,
    TextColumn,
    TimeElapsedColumn,
)

#: Seconds between two plain lines when standard error is not a terminal.
PLAIN_INTERVAL_S = 5.0


class ProgressDisplay:
    """Progress of one long job: messages, counts, or both.

    Parameters
    ----------
    title : str
        What the job is ("simulating rooftop", "analysing das9201").
    stream : file, optional
        Where to draw (standard error by default).
    unit : str
        What is counted ("cases", "sessions"), shown after the count.
    delay : float
        Seconds of work before anything live is drawn, so quick jobs stay quiet;
        the final count is always written where no terminal shows it live.

    Examples
    --------
    >>> with ProgressDisplay("counting", stream=io.StringIO()) as progress:  # doctest: +SKIP
    ...     for i in range(10):
    ...         progress.count(i + 1, 10)
    """

    def __init__(self, title: str, *, unit: str = "", stream: TextIO | None = None, delay: float = 0.5):
        self.title = title
        self.unit = unit
        self.stream = stream if stream is not None else sys.stderr
        self.delay = delay
        self.started = time.monotonic()
        self.terminal = bool(getattr(self.stream, "isatty", lambda: False)())
        self._live: Progress | None = None
        self._task: TaskID | None = None
        self._last_plain = -PLAIN_INTERVAL_S
        self._text = ""
        self._done: int | None = None
        self._total: int | None = None

    # -- the two callback forms ------------------------------------------------
    def __call__(self, *args) -> None:
        """``progress("message")`` or ``progress(done, total)``: whichever the job reports."""
        if len(args) == 2:
            self.count(int(args[0]), int(args[1]))
        else:
            self.message(str(args[0]))

    def message(self, text: str) -> None:
        """Say what the job is doing now."""
        self._text = text
        self._show()

    def count(self, done: int, total: int) -> None:
        """Say how many of how many units are done."""
        self._done, self._total = done, total
        self._show(final=done >= total)

    # -- drawing -----------------------------------------------------------------
    def _show(self, final: bool = False) -> None:
        now = time.monotonic()
        if now - self.started < self.delay and not final:
            return
        if self.terminal:
            self._draw_live()
        elif final or now - self._last_plain >= PLAIN_INTERVAL_S:
            self._last_plain = now
            self.stream.write(self._plain_line() + "\n")
            self.stream.flush()

    def _plain_line(self) -> str:
        parts = []
        if self._done is not None and self._total is not None:
            parts.append(f"{self._done:,}/{self._total:,} {self.unit}".rstrip())
        if self._text:
            parts.append(self._text)
        parts.append(f"{time.monotonic() - self.started:.0f} s elapsed")
        return f"{self.title}: " + ", ".join(parts)

    def _draw_live(self) -> None:
        if self._live is None:
            console = Console(file=self.stream, stderr=self.stream is sys.stderr)
            self._live = Progress(
                SpinnerColumn(),
                TextColumn("{task.description}"),
                BarColumn(),
                MofNCompleteColumn(),
                TimeElapsedColumn(),
                console=console,
                transient=True,
            )
            self._live.start()
            self._task = self._live.add_task(self.title, total=None)
        description = f"{self.title}: {self._text}" if self._text else self.title
        assert self._task is not None
        self._live.update(self._task, description=description, completed=self._done or 0, total=self._total)

    def close(self) -> None:
        """Clear the live line (the result follows on standard output)."""
        if self._live is not None:
            self._live.stop()
            self._live = None

    def __enter__(self) -> ProgressDisplay:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

"""A one-line text progress bar for the command line (loading, evolving)."""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from typing import TextIO

__all__ = ["TextProgress", "wants_progress", "LoadingBar"]


class TextProgress:
    """A one-line text progress bar, redrawn at most every ``interval`` seconds.

    Use as the ``progress(steps, time)`` callback of :func:`engine.segment.segment`.

    Parameters
    ----------
    total : int
        Step limit; the bar fills towards it.
    stream : text stream
        Where to draw (normally ``sys.stderr``).
    label : str
        Text in front of the bar.
    width : int
        Characters of the bar itself.
    interval : float
        Smallest time between redraws in seconds.
    clock : callable
        Monotonic clock in seconds (for tests).
    """

    def __init__(self, total: int, *, stream: TextIO, label: str = "evolving", width: int = 24,
                 interval: float = 0.2, clock: Callable[[], float] = time.monotonic) -> None:
        if total < 1:
            raise ValueError(f"total: expected >= 1, got {total}")
        self.total = int(total)
        self.stream = stream
        self.label = label
        self.width = int(width)
        self.interval = float(interval)
        self.clock = clock
        self._start = clock()
        self._last_draw = -math.inf
        self._shown = 0
        self.draws = 0

    def line(self, steps: int, t: float) -> str:
        """The bar's text for ``steps`` steps at evolution time ``t`` (a loading bar: parts done)."""
        fraction = min(max(steps / self.total, 0.0), 1.0)
        filled = int(round(fraction * self.width))
        elapsed = max(self.clock() - self._start, 1e-9)
        bar = f"{self.label} [{'#' * filled}{'.' * (self.width - filled)}] {steps}/{self.total}"
        if self.label == "loading":
            return f"{bar}, {elapsed:.1f} s"
        return f"{bar} steps, t = {t:.4g}, {steps / elapsed:.0f} steps/s"

    def __call__(self, steps: int, t: float) -> None:
        now = self.clock()
        if now - self._last_draw < self.interval and steps < self.total:
            return
        self._last_draw = now
        text = self.line(steps, t)
        pad = max(self._shown - len(text), 0)
        self.stream.write("\r" + text + " " * pad)
        self.stream.flush()
        self._shown = len(text)
        self.draws += 1

    def close(self) -> None:
        """Erase the bar (the summary follows on stdout)."""
        if self._shown:
            self.stream.write("\r" + " " * self._shown + "\r")
            self.stream.flush()
            self._shown = 0


def wants_progress(forced: bool, stream: TextIO) -> bool:
    """Show a bar when asked for or when ``stream`` is a terminal."""
    if forced:
        return True
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


class LoadingBar:
    """A ``progress(done, total)`` callback of :func:`engine.io.load` that draws a "loading" bar.

    Parameters
    ----------
    stream : text stream
        Where to draw (normally ``sys.stderr``).
    clock : callable
        Monotonic clock in seconds (for tests).
    """

    def __init__(self, *, stream: TextIO, clock: Callable[[], float] = time.monotonic) -> None:
        self.stream = stream
        self.clock = clock
        self.bar: TextProgress | None = None

    def __call__(self, done: int, total: int) -> None:
        if self.bar is None or self.bar.total != max(int(total), 1):
            shown = self.bar._shown if self.bar is not None else 0
            self.bar = TextProgress(max(int(total), 1), stream=self.stream, label="loading", clock=self.clock)
            self.bar._shown = shown
        self.bar(int(done), 0.0)

    def close(self) -> None:
        """Erase the bar."""
        if self.bar is not None:
            self.bar.close()

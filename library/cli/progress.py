"""A quiet progress bar on stderr that appears only for runs longer than a moment."""

from __future__ import annotations

import sys
import time
from typing import TextIO

__all__ = ["ProgressBar"]


class ProgressBar:
    """``bar.update(done, note)``; draws after ``delay`` seconds, at most 5 times a second.

    It draws only on a terminal (one redrawn line); piped or logged output
    stays clean.
    """

    def __init__(self, total: int, label: str, *, stream: TextIO | None = None, delay: float = 2.0, enabled: bool = True):
        self.total = max(int(total), 1)
        self.label = label
        self.stream = stream or sys.stderr
        self.delay = delay
        self.enabled = enabled
        self._start = time.monotonic()
        self._last_draw = 0.0
        self._drawn = False
        self._tty = hasattr(self.stream, "isatty") and self.stream.isatty()

    def update(self, done: int, note: str = "") -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        elapsed = now - self._start
        if elapsed < self.delay:
            return
        fraction = min(max(done / self.total, 0.0), 1.0)
        if self._tty:
            if now - self._last_draw < 0.2 and done < self.total:
                return
            width = 24
            filled = int(round(fraction * width))
            bar = "#" * filled + "." * (width - filled)
            self.stream.write(f"\r{self.label} [{bar}] {fraction:5.1%} {note}\x1b[K")
            self.stream.flush()
        else:
            return
        self._last_draw = now
        self._drawn = True

    def close(self) -> None:
        if self._drawn and self._tty:
            self.stream.write("\n")
            self.stream.flush()

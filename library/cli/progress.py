"""Progress of long commands: a tqdm bar on a terminal, plain lines in logs and pipes.

On a terminal the bar redraws in place. Anywhere else (CI logs, pipes, files) a
plain line ``LABEL: DONE/TOTAL UNIT (P%), RATE UNIT/s, about T left`` is printed at
least every ``every`` seconds while the work runs (a timer thread keeps the beat
even when updates are rare) and once at the end. ``quiet`` turns both off.
"""

from __future__ import annotations

import sys
import threading
import time
from typing import Any, TextIO

__all__ = ["Progress", "plain_line"]

PLAIN_EVERY_SECONDS = 10.0


def plain_line(label: str, done: int, total: int | None, unit: str, elapsed: float) -> str:
    """``arm-reach: 4,096/20,480 steps (20.0%), 1,234 steps/s, about 13 s left``."""
    rate = done / elapsed if elapsed > 0 else 0.0
    if total:
        text = f"{label}: {done:,}/{total:,} {unit} ({100.0 * min(done / total, 1.0):.1f}%), {rate:,.0f} {unit}/s"
        if rate > 0 and done < total:
            text += f", about {_duration((total - done) / rate)} left"
        return text
    return f"{label}: {done:,} {unit}, {rate:,.0f} {unit}/s"


def _duration(seconds: float) -> str:
    seconds = max(0.0, seconds)
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 5400:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


class Progress:
    """``with Progress("retrain", total=N, unit="steps") as p: p.update(done)`` (``done`` is a running total).

    ``total`` may be set later (``p.update(done, total=...)``); ``stream`` defaults to stderr.
    """

    def __init__(
        self,
        label: str,
        *,
        total: int | None = None,
        unit: str = "steps",
        stream: TextIO | None = None,
        quiet: bool = False,
        every: float = PLAIN_EVERY_SECONDS,
    ):
        self.label, self.unit, self.quiet, self.every = label, unit, quiet, every
        self.stream = stream or sys.stderr
        self.total = int(total) if total else None
        self.done = 0
        self._start = time.monotonic()
        self._lock = threading.Lock()
        self._bar: Any = None
        self._stop = threading.Event()
        self._ticker: threading.Thread | None = None
        self._closed = False
        if quiet:
            return
        if _is_terminal(self.stream):
            from tqdm import tqdm

            self._bar = tqdm(total=self.total, desc=label, unit=f" {unit}", file=self.stream, dynamic_ncols=True,
                             mininterval=0.2, unit_scale=True, leave=True)
        else:
            self._ticker = threading.Thread(target=self._beat, name=f"progress {label}", daemon=True)
            self._ticker.start()

    def update(self, done: int, *, total: int | None = None) -> None:
        """Record that ``done`` units are finished (and the total, when it became known)."""
        with self._lock:
            if total:
                self.total = int(total)
            self.done = max(int(done), 0)
            if self._bar is not None:
                if total and self._bar.total != self.total:
                    self._bar.total = self.total
                self._bar.update(self.done - self._bar.n)

    def line(self) -> str:
        """The plain progress line for now."""
        with self._lock:
            return plain_line(self.label, self.done, self.total, self.unit, time.monotonic() - self._start)

    def _beat(self) -> None:
        while not self._stop.wait(self.every):
            if self.done or self.total:  # nothing to report before the work reports in
                self._write(self.line())

    def _write(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()

    def close(self) -> None:
        """Stop the bar or the beat; in plain mode print the final line."""
        if self._closed:
            return
        self._closed = True
        if self._bar is not None:
            self._bar.close()
        if self._ticker is not None:
            self._stop.set()
            self._ticker.join()
            if self.done or self.total:
                elapsed = time.monotonic() - self._start
                self._write(f"{self.label}: finished in {_duration(elapsed)} ({self.done:,} {self.unit})")

    def __enter__(self) -> "Progress":
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _is_terminal(stream: Any) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False

"""Fault-injection points: a test stops a process at a known moment of a write.

Normal runs never arm them: ``fault_point`` returns at once unless the
environment variable ``KINETOME_FAULT_POINT`` names that point. Armed as
``NAME@READY_FILE``, the process writes ``READY_FILE`` when it reaches the point
and then waits (up to an hour) to be killed, so a crash test kills it *during*
the write on a machine of any speed instead of at a random moment.
Standard library only.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

__all__ = ["FAULT_POINT_ENV", "fault_point"]

FAULT_POINT_ENV = "KINETOME_FAULT_POINT"


def fault_point(name: str) -> None:
    """Wait here to be killed if the environment arms point ``name``; otherwise do nothing."""
    armed = os.environ.get(FAULT_POINT_ENV)
    if not armed:
        return
    point, _, ready = armed.partition("@")
    if point != name:
        return
    if ready:
        # Written whole, then renamed: the waiting test never reads a half-written file.
        partial = Path(f"{ready}.partial")
        partial.write_text(name, encoding="utf-8")
        os.replace(partial, ready)
    time.sleep(3600)

"""Files kinetome writes get the user's umask, like any other program's (0644 under umask 022).

``tempfile.mkstemp`` creates files readable by their owner only (0600), and an atomic
write that renames such a temp file keeps that mode: a teammate could not read the
report, curve, bundle or store blob. ``apply_umask`` gives the temp file the mode a
plain ``open(path, "w")`` would have given it.
"""

from __future__ import annotations

import os

__all__ = ["current_umask", "apply_umask"]


def current_umask() -> int:
    """The process umask, read without changing it where the system allows (Linux: /proc)."""
    try:
        with open("/proc/self/status", encoding="ascii") as status:
            for line in status:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)  # elsewhere: read by setting, then restore at once
    os.umask(mask)
    return mask


def apply_umask(fd: int) -> None:
    """Give the open file ``fd`` mode 0666 less the umask (what ``open(path, "w")`` creates)."""
    os.fchmod(fd, 0o666 & ~current_umask())

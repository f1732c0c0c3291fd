"""Atomic file writes: temp file in the same folder, fsync, then os.replace."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from kinetome.library.file_modes import apply_umask

__all__ = ["write_atomic"]


def write_atomic(path: Path, data: bytes) -> None:
    """Replace ``path`` with ``data`` so that readers see the old or the new file, never half."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        apply_umask(fd)  # mkstemp makes 0600; the file gets the user's umask like any other
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise

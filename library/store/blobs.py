"""Content-addressed blob folder: ``blobs/<aa>/<sha256>``, written atomically (temp, fsync, rename)."""

from __future__ import annotations

import hashlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.fault_points import fault_point
from kinetome.library.file_modes import apply_umask

__all__ = ["BlobDir", "sha256_bytes", "hash_file"]

_CHUNK = 1 << 20


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def hash_file(path: Path) -> tuple[str, int]:
    """(sha256 hex, size in bytes) of a file, read in chunks."""
    h = hashlib.sha256()
    size = 0
    with open(path, "rb") as f:
        while chunk := f.read(_CHUNK):
            h.update(chunk)
            size += len(chunk)
    return h.hexdigest(), size


def _fsync_dir(path: Path) -> None:
    """Make a rename inside ``path`` durable (POSIX); a no-op where folders cannot be opened."""
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class BlobDir:
    """The ``blobs/`` and ``tmp/`` folders of one store.

    A file at a digest path is always complete: content is written to a temp file
    in ``tmp/`` (same file system), fsynced, then ``os.replace``d onto its path.
    """

    def __init__(self, root: Path):
        self.blobs = root / "blobs"
        self.tmp = root / "tmp"

    def create(self) -> None:
        self.blobs.mkdir(parents=True, exist_ok=True)
        self.tmp.mkdir(parents=True, exist_ok=True)

    def path(self, digest: str) -> Path:
        return self.blobs / digest[:2] / digest

    def is_intact(self, digest: str) -> bool:
        path = self.path(digest)
        try:
            return hash_file(path)[0] == digest
        except FileNotFoundError:
            return False

    def put(self, data: bytes) -> str:
        """Store ``data`` (if not already stored intact) and return its digest."""
        digest = sha256_bytes(data)
        if self.is_intact(digest):
            return digest
        fd, tmp_name = tempfile.mkstemp(prefix="blob-", dir=self.tmp)
        try:
            apply_umask(fd)  # a shared store stays readable by the group the umask allows
            with os.fdopen(fd, "wb") as f:
                f.write(data)
                f.flush()
                os.fsync(f.fileno())
            fault_point("store.blob-before-rename")  # temp file written and fsynced, not yet in place
            self._place(Path(tmp_name), digest)
        except BaseException:
            Path(tmp_name).unlink(missing_ok=True)
            raise
        return digest

    def adopt(self, staged: Path, digest: str) -> None:
        """Move an already-verified, fsynced file into place as blob ``digest``."""
        if self.is_intact(digest):
            staged.unlink(missing_ok=True)
            return
        self._place(staged, digest)

    def _place(self, tmp_path: Path, digest: str) -> None:
        target = self.path(digest)
        target.parent.mkdir(parents=True, exist_ok=True)
        os.replace(tmp_path, target)
        _fsync_dir(target.parent)

    def read(self, digest: str, *, size: int | None, used_by: str) -> bytes:
        """Read blob ``digest`` and check its sha256 (and size); StoreIntegrityError if damaged."""
        path = self.path(digest)
        fix = "restore the store folder from a backup or re-import a bundle; run `kinetome verify` to list all damage"
        try:
            data = path.read_bytes()
        except FileNotFoundError:
            raise StoreIntegrityError(f"blob {digest} ({used_by}) is missing at {path}; {fix}") from None
        actual = sha256_bytes(data)
        if actual != digest:
            raise StoreIntegrityError(
                f"blob {digest} ({used_by}) is corrupt at {path}: its sha256 is {actual}; {fix}"
            )
        if size is not None and len(data) != size:
            raise StoreIntegrityError(
                f"blob {digest} ({used_by}) has {len(data)} bytes but the index records {size}; {fix}"
            )
        return data

    def stored_files(self) -> Iterator[Path]:
        """Every file under ``blobs/`` (well-formed or not), sorted."""
        if not self.blobs.is_dir():
            return
        for sub in sorted(self.blobs.iterdir()):
            if sub.is_dir():
                yield from sorted(p for p in sub.iterdir())
            else:
                yield sub

    def temp_files(self) -> list[Path]:
        if not self.tmp.is_dir():
            return []
        return sorted(self.tmp.iterdir())

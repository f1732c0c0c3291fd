"""Where a store keeps its files: content-addressed blobs ``blobs/<aa>/<sha256>``.

``BlobStore`` is the interface; ``BlobDir`` is a folder (the store's own, or a shared one
mounted on every machine), written atomically (temp, fsync, rename). Object storage
(``s3://``) is ``blob_objects.ObjectBlobs``; ``open_blobs`` picks one from a location."""

from __future__ import annotations

import hashlib
import os
import tempfile
from abc import ABC, abstractmethod
from collections.abc import Iterator
from pathlib import Path

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.fault_points import fault_point
from kinetome.library.file_modes import apply_umask
from kinetome.library.store.records import is_digest

__all__ = ["BlobStore", "BlobDir", "open_blobs", "is_object_url", "sha256_bytes", "hash_file", "REPAIR_HINT"]

_CHUNK = 1 << 20
REPAIR_HINT = "restore the store from a backup or re-import a bundle; run `kinetome verify` to list all damage"


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


class BlobStore(ABC):
    """Content-addressed blobs: a blob at a digest's place is always complete."""

    #: where the blobs are, for messages and ``store_info`` (a folder path or a URL)
    location: str

    @abstractmethod
    def create(self) -> None:
        """Make the place exist (a no-op where nothing needs making)."""

    @abstractmethod
    def put(self, data: bytes) -> str:
        """Store ``data`` (unless already stored whole) and return its sha256."""

    @abstractmethod
    def adopt(self, staged: Path, digest: str) -> None:
        """Store an already verified local file as blob ``digest`` (the file is moved or removed)."""

    @abstractmethod
    def read_raw(self, digest: str) -> bytes | None:
        """The stored bytes of ``digest`` as they are, or None if missing."""

    @abstractmethod
    def where(self, digest: str) -> Path | str:
        """The place of blob ``digest`` (a path or a URL), for messages."""

    @abstractmethod
    def hash_stored(self, digest: str) -> tuple[str, int] | None:
        """(sha256, size) of what is stored at ``digest``'s place, or None if missing."""

    @abstractmethod
    def strays(self, expected: set[str]) -> list[Path | str]:
        """Stored things that are not one of the ``expected`` blobs (harmless leftovers), sorted."""

    @abstractmethod
    def temp_files(self) -> list[Path | str]:
        """Leftovers of interrupted writes (or writes in progress)."""

    @abstractmethod
    def staging_dir(self) -> Path:
        """A local folder for files that are checked before they become blobs."""

    def read(self, digest: str, *, size: int | None, used_by: str) -> bytes:
        """Read blob ``digest`` and check its sha256 (and size); StoreIntegrityError if damaged."""
        data = self.read_raw(digest)
        where = self.where(digest)
        if data is None:
            raise StoreIntegrityError(f"blob {digest} ({used_by}) is missing at {where}; {REPAIR_HINT}")
        actual = sha256_bytes(data)
        if actual != digest:
            raise StoreIntegrityError(f"blob {digest} ({used_by}) is corrupt at {where}: its sha256 is {actual}; {REPAIR_HINT}")
        if size is not None and len(data) != size:
            raise StoreIntegrityError(f"blob {digest} ({used_by}) has {len(data)} bytes but the index records {size}; {REPAIR_HINT}")
        return data


def is_object_url(location: str) -> bool:
    """True for a blob location naming object storage (``s3://bucket/prefix``) rather than a folder."""
    return "://" in location and not location.startswith("file://")


def open_blobs(location: str | os.PathLike) -> BlobStore:
    """The blob store at a folder (or ``file://`` URL) or at an object-storage URL (``s3://...``)."""
    text = str(location)
    if is_object_url(text):
        from kinetome.library.store.blob_objects import ObjectBlobs

        return ObjectBlobs(text)
    if text.startswith("file://"):
        text = text[len("file://") :]
    return BlobDir(Path(text).expanduser())


class BlobDir(BlobStore):
    """The ``blobs/`` and ``tmp/`` folders under one folder (a store folder, or a shared blob folder).

    A file at a digest path is always complete: content is written to a temp file
    in ``tmp/`` (same file system), fsynced, then ``os.replace``d onto its path.
    """

    def __init__(self, root: Path):
        self.root = root
        self.location = str(root)
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

    def read_raw(self, digest: str) -> bytes | None:
        try:
            return self.path(digest).read_bytes()
        except FileNotFoundError:
            return None

    def where(self, digest: str) -> Path:
        return self.path(digest)

    def hash_stored(self, digest: str) -> tuple[str, int] | None:
        try:
            return hash_file(self.path(digest))
        except FileNotFoundError:
            return None

    def strays(self, expected: set[str]) -> list[Path]:
        return [
            p
            for p in self.stored_files()
            if not (is_digest(p.name) and p.parent.name == p.name[:2] and p.name in expected and p.is_file())
        ]

    def staging_dir(self) -> Path:
        self.create()
        return self.tmp

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

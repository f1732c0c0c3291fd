"""The archive layer of bundles: the canonical tar writer, and a checked reader of untrusted archives.

A bundle is accepted only if its (uncompressed) tar bytes are exactly the canonical
archive of its members: so no byte outside the digested contents (header fields,
padding, order, trailing data) can change unnoticed. The gzip layer must have our
fixed header, a correct CRC-32 and length, and nothing after its end.
"""

from __future__ import annotations

import hashlib
import io
import os
import re
import tarfile
import zlib
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import BinaryIO

from kinetome.library.errors import BundleError

__all__ = [
    "GZIP_HEADER",
    "GzipSink",
    "gzip_bytes",
    "Member",
    "write_canonical_tar",
    "canonical_sha256",
    "ArchiveReader",
    "check_member",
    "copy_member",
]

# gzip header (RFC 1952) as bundles have it: deflate, no flags, mtime 0, XFL 2 (best compression), OS 255 (unknown)
GZIP_HEADER = bytes.fromhex("1f8b08000000000002ff")
_CHUNK = 1 << 20
_MAX_TRAILER = 2 * tarfile.RECORDSIZE  # end-of-archive blocks plus record padding

# (member name, size, opener returning a binary file)
Member = tuple[str, int, Callable[[], BinaryIO]]


class GzipSink:
    """Write a gzip file (RFC 1952) with kinetome's fixed header, whatever the Python version."""

    def __init__(self, target: BinaryIO):
        self.target = target
        self._deflate = zlib.compressobj(9, zlib.DEFLATED, -zlib.MAX_WBITS)
        self._crc, self._length = 0, 0
        target.write(GZIP_HEADER)

    def write(self, data: bytes) -> int:
        self._crc = zlib.crc32(data, self._crc)
        self._length += len(data)
        self.target.write(self._deflate.compress(data))
        return len(data)

    def close(self) -> None:
        self.target.write(self._deflate.flush())
        self.target.write(self._crc.to_bytes(4, "little") + (self._length & 0xFFFFFFFF).to_bytes(4, "little"))


def gzip_bytes(data: bytes) -> bytes:
    """``data`` gzipped the way bundles are."""
    out = io.BytesIO()
    sink = GzipSink(out)
    sink.write(data)
    sink.close()
    return out.getvalue()


class _HashSink:
    """A write-only file that keeps the sha256 and length of what was written."""

    def __init__(self, target: BinaryIO | None = None):
        self.sha256 = hashlib.sha256()
        self.size = 0
        self.target = target

    def write(self, data: bytes) -> int:
        self.sha256.update(data)
        self.size += len(data)
        if self.target is not None:
            self.target.write(data)
        return len(data)

    def tell(self) -> int:
        return self.size


def _member_info(name: str, size: int) -> tarfile.TarInfo:
    info = tarfile.TarInfo(name)
    info.size = size
    info.mode = 0o644
    info.mtime = 0  # identical content gives identical archives
    info.uname = info.gname = ""
    return info


def write_canonical_tar(sink: BinaryIO, members: Iterable[Member]) -> str:
    """Write the canonical PAX tar of ``members`` (in the given order) to ``sink``; return its sha256."""
    hashed = _HashSink(sink)
    with tarfile.open(fileobj=hashed, mode="w", format=tarfile.PAX_FORMAT) as tar:  # type: ignore[arg-type]
        for name, size, opener in members:
            with opener() as f:
                tar.addfile(_member_info(name, size), f)
    return hashed.sha256.hexdigest()


def canonical_sha256(members: Iterable[Member]) -> str:
    """The sha256 of the canonical tar of ``members``, without writing it anywhere."""
    return write_canonical_tar(None, members)  # type: ignore[arg-type]


def bytes_member(name: str, data: bytes) -> Member:
    return name, len(data), lambda: io.BytesIO(data)


def file_member(name: str, path: Path, size: int) -> Member:
    return name, size, lambda: open(path, "rb")


class ArchiveReader:
    """A read-only stream of an archive's tar bytes (gunzipped when it starts with the gzip magic),
    hashing every tar byte handed out."""

    def __init__(self, raw: BinaryIO, source: Path):
        self.raw, self.source = raw, source
        self.sha256 = hashlib.sha256()
        head = raw.read(len(GZIP_HEADER))
        self.gzip = head[:2] == b"\x1f\x8b"
        if self.gzip and head != GZIP_HEADER:
            raise BundleError(
                f"{source} has gzip header {head.hex()}, not the {GZIP_HEADER.hex()} kinetome writes; "
                "it was re-compressed or altered: export it again"
            )
        self._inflate = zlib.decompressobj(wbits=-zlib.MAX_WBITS) if self.gzip else None
        self._crc, self._length = 0, 0
        self._pending = b"" if self.gzip else head

    def read(self, n: int = -1) -> bytes:
        out = self._read(n)
        self.sha256.update(out)
        return out

    def _read(self, n: int) -> bytes:
        if self._inflate is None:
            head = self._pending if n < 0 else self._pending[:n]
            self._pending = self._pending[len(head) :]
            if n < 0:
                return head + self.raw.read()
            return head + (self.raw.read(n - len(head)) if n > len(head) else b"")
        out = b""
        while (n < 0 or len(out) < n) and not self._inflate.eof:
            chunk = self._inflate.unconsumed_tail or self.raw.read(_CHUNK)
            if not chunk:
                raise BundleError(f"{self.source}: the compressed data ends early (Compressed file ended before the end-of-stream marker was reached)")
            want = 0 if n < 0 else n - len(out)
            piece = self._inflate.decompress(chunk, want)
            self._crc = zlib.crc32(piece, self._crc)
            self._length += len(piece)
            out += piece
        return out

    def finish(self) -> None:
        """Read what the tar reader left (end blocks, padding) and check the end of the file."""
        rest = self.read(_MAX_TRAILER + 1)
        if len(rest) > _MAX_TRAILER or self.read(1):
            raise BundleError(f"{self.source} has data after the end of the archive; refused")
        if self._inflate is not None:
            trailer = self._inflate.unused_data + self.raw.read(9)
            expected = zlib.crc32(b"", self._crc).to_bytes(4, "little") + (self._length & 0xFFFFFFFF).to_bytes(4, "little")
            if trailer != expected:
                raise BundleError(
                    f"{self.source}: the gzip trailer (CRC-32 and length) does not match the data, or bytes follow it; "
                    "the archive is damaged or was altered"
                )


_LAYOUT = "a bundle holds only seal.json, signature.json (if signed), manifest.json and blobs/<sha256> as regular files"


def check_member(member: tarfile.TarInfo, max_member_bytes: int) -> None:
    """Refuse unsafe paths, non-regular members and oversized members (before reading data)."""
    name = member.name
    if not name:
        raise BundleError(f"a member has an empty name; {_LAYOUT}")
    norm = name.replace("\\", "/")
    if norm.startswith("/") or re.match(r"[A-Za-z]:", norm):
        raise BundleError(f"member {name!r} has an absolute path; refused ({_LAYOUT})")
    if ".." in norm.split("/"):
        raise BundleError(f"member {name!r} has a '..' component that would leave the import folder; refused")
    if member.issym():
        raise BundleError(f"member {name!r} is a symbolic link (to {member.linkname!r}); refused ({_LAYOUT})")
    if member.islnk():
        raise BundleError(f"member {name!r} is a hard link (to {member.linkname!r}); refused ({_LAYOUT})")
    if member.ischr() or member.isblk():
        raise BundleError(f"member {name!r} is a device file; refused ({_LAYOUT})")
    if member.isfifo():
        raise BundleError(f"member {name!r} is a FIFO (named pipe); refused ({_LAYOUT})")
    if member.isdir():
        raise BundleError(f"member {name!r} is a directory; refused ({_LAYOUT})")
    if member.issparse() or not member.isreg():
        raise BundleError(f"member {name!r} has unsupported tar type {member.type!r}; refused ({_LAYOUT})")
    if member.size > max_member_bytes:
        raise BundleError(
            f"member {name!r} is {member.size} bytes, over the per-member limit of {max_member_bytes} bytes; refused"
        )


def copy_member(tar: tarfile.TarFile, member: tarfile.TarInfo, sink) -> tuple[str, int]:
    """Stream one member's data into ``sink``; returns (sha256, bytes read)."""
    source = tar.extractfile(member)
    if source is None:
        raise BundleError(f"member {member.name!r} has no data; refused")
    h = hashlib.sha256()
    n = 0
    while n < member.size:
        chunk = source.read(min(_CHUNK, member.size - n))
        if not chunk:
            break
        h.update(chunk)
        sink.write(chunk)
        n += len(chunk)
    if n != member.size:
        raise BundleError(f"member {member.name!r} is truncated: {n} of {member.size} bytes; the archive is damaged")
    return h.hexdigest(), n


def fsync_write(path: Path, write: Callable[[BinaryIO], tuple[str, int]]) -> tuple[str, int]:
    with open(path, "wb") as f:
        out = write(f)
        f.flush()
        os.fsync(f.fileno())
    return out

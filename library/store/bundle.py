"""Bundles: one tar (optionally gzip) archive of a version, its lineage and models, with a digest manifest.

Import never extracts: members are read one by one into a staging folder and
checked (paths, types, sizes, digests, manifest) before anything touches the
store; then blobs are moved into place and the index changes in one transaction.
"""

from __future__ import annotations

import gzip
import hashlib
import io
import os
import re
import shutil
import tarfile
import tempfile
import zlib
from pathlib import Path

from kinetome.library.errors import BundleError, InvalidInputError
from kinetome.library.file_modes import apply_umask
from kinetome.library.store import index
from kinetome.library.store.manifest import MANIFEST_NAME, BundleVersion, Manifest, build_manifest, parse_manifest
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.records import VersionRecord
from kinetome.library.store.schema import write_transaction
from kinetome.library.store.store import Store

__all__ = [
    "MAX_MEMBER_BYTES",
    "MAX_TOTAL_BYTES",
    "MAX_MEMBERS",
    "MAX_MANIFEST_BYTES",
    "export_bundle",
    "import_bundle",
]

MAX_MEMBER_BYTES = 256 * 1024**2
MAX_TOTAL_BYTES = 4 * 1024**3
MAX_MEMBERS = 100_000
MAX_MANIFEST_BYTES = 16 * 1024**2

_BLOB_MEMBER_RE = re.compile(r"blobs/([0-9a-f]{64})")
_CHUNK = 1 << 20
_LAYOUT = f"a bundle holds only {MANIFEST_NAME} and blobs/<sha256> as regular files"


# -- export ----------------------------------------------------------------------------


def _add_member(tar: tarfile.TarFile, name: str, data: bytes) -> None:
    info = tarfile.TarInfo(name)
    info.size = len(data)
    info.mode = 0o644
    info.mtime = 0  # identical content gives identical archives
    info.uname = info.gname = ""
    tar.addfile(info, io.BytesIO(data))


def export_bundle(
    store: Store,
    ref: str,
    path: str | os.PathLike,
    *,
    with_lineage: bool = True,
    compress: bool | None = None,
) -> Path:
    """Write ``ref`` (and, with lineage, all its ancestors) with their models and notes to one archive.

    ``path`` is the archive file, or an existing folder to write ``<name>-<N>.kinetome.tar.gz`` into.
    ``compress=None`` gzips when the file name ends in ``.gz`` or ``.tgz``. Returns the written path.
    Every blob is re-hashed on the way out, so a damaged store cannot produce a bundle.
    """
    version = store.get(ref)
    chain = list(reversed(store.lineage(version.ref))) if with_lineage else [version]
    models = {v.ref: store.models(v.ref, all_revisions=True) for v in chain}
    notes = {v.ref: store.notes(v.ref) for v in chain}
    manifest = build_manifest(version.ref, chain, models, notes)
    users: dict[str, tuple[int, str]] = {}
    for v in chain:
        for e in v.files:
            users.setdefault(e.digest, (e.size, f"{v.ref} {e.role}"))
        for m in models[v.ref]:
            for e in m.files:
                users.setdefault(e.digest, (e.size, f"{m.ref} {e.role}"))

    target = Path(path).expanduser()
    if target.is_dir():
        target = target / f"{version.name}-{version.number}.kinetome.tar.gz"
    if not target.parent.is_dir():
        raise InvalidInputError(f"bundle folder {target.parent} must exist, got a missing folder; create it first")
    if compress is None:
        compress = target.name.endswith((".gz", ".tgz"))
    fd, tmp_name = tempfile.mkstemp(prefix=".kinetome-bundle-", dir=target.parent)
    try:
        apply_umask(fd)
        with os.fdopen(fd, "wb") as raw:
            sink = gzip.GzipFile(filename="", mode="wb", fileobj=raw, mtime=0) if compress else raw
            with tarfile.open(fileobj=sink, mode="w", format=tarfile.PAX_FORMAT) as tar:
                _add_member(tar, MANIFEST_NAME, manifest)
                for digest in sorted(users):
                    size, used_by = users[digest]
                    _add_member(tar, f"blobs/{digest}", store._blobs.read(digest, size=size, used_by=used_by))
            if compress:
                sink.close()
            raw.flush()
            os.fsync(raw.fileno())
        os.replace(tmp_name, target)
    except BaseException:
        Path(tmp_name).unlink(missing_ok=True)
        raise
    return target


# -- import: reading and checking members ----------------------------------------------


def _check_member(member: tarfile.TarInfo, max_member_bytes: int) -> None:
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


def _copy_member(tar: tarfile.TarFile, member: tarfile.TarInfo, sink) -> tuple[str, int]:
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


def _read_archive(
    source: Path, staging: Path, *, max_member_bytes: int, max_total_bytes: int, max_members: int
) -> tuple[bytes, dict[str, tuple[Path, int]]]:
    """(manifest bytes, digest -> (staged file, size)) after checking every member."""
    with open(source, "rb") as raw:
        # gzip via GzipFile (not tarfile's own stream) so a truncated archive raises EOFError
        stream = gzip.GzipFile(fileobj=raw, mode="rb") if raw.read(2) == b"\x1f\x8b" else raw
        raw.seek(0)
        return _read_stream(
            source, stream, staging, max_member_bytes=max_member_bytes, max_total_bytes=max_total_bytes, max_members=max_members
        )


def _read_stream(
    source: Path, stream, staging: Path, *, max_member_bytes: int, max_total_bytes: int, max_members: int
) -> tuple[bytes, dict[str, tuple[Path, int]]]:
    try:
        tar = tarfile.open(fileobj=stream, mode="r|")
    except (tarfile.TarError, OSError, EOFError, zlib.error) as e:
        raise BundleError(
            f"{source} is not a readable tar or tar.gz archive ({e}); export it again with `kinetome export`"
        ) from None
    manifest: bytes | None = None
    staged: dict[str, tuple[Path, int]] = {}
    seen: set[str] = set()
    total = 0
    last = "(start of archive)"
    with tar:
        while True:
            try:
                member = tar.next()
            except (tarfile.TarError, OSError, EOFError, zlib.error) as e:
                raise BundleError(f"{source} is damaged after member {last!r} ({e}); export it again") from None
            if member is None:
                break
            if len(seen) >= max_members:
                raise BundleError(f"{source} has more than {max_members} members; refused")
            _check_member(member, max_member_bytes)
            name = member.name
            if name in seen:
                raise BundleError(f"member {name!r} appears twice in the archive; refused")
            seen.add(name)
            total += member.size
            if total > max_total_bytes:
                raise BundleError(
                    f"member {name!r} brings the archive to {total} bytes, over the total limit of {max_total_bytes}; refused"
                )
            try:
                if name == MANIFEST_NAME:
                    if member.size > MAX_MANIFEST_BYTES:
                        raise BundleError(
                            f"member {name!r} is {member.size} bytes, over the limit of {MAX_MANIFEST_BYTES}; refused"
                        )
                    buf = io.BytesIO()
                    _copy_member(tar, member, buf)
                    manifest = buf.getvalue()
                elif match := _BLOB_MEMBER_RE.fullmatch(name):
                    digest = match.group(1)
                    path = staging / f"{len(staged):06d}"
                    with open(path, "wb") as f:
                        actual, size = _copy_member(tar, member, f)
                        f.flush()
                        os.fsync(f.fileno())
                    if actual != digest:
                        raise BundleError(
                            f"member {name!r} does not match its name: its content has sha256 {actual}; "
                            "the archive is damaged or was altered"
                        )
                    staged[digest] = (path, size)
                else:
                    raise BundleError(f"member {name!r} is not listed in {MANIFEST_NAME}; refused ({_LAYOUT})")
            except (tarfile.TarError, OSError, EOFError, zlib.error) as e:
                raise BundleError(f"member {name!r} could not be read ({e}); the archive is damaged") from None
            last = name
    if manifest is None:
        raise BundleError(f"{source} has no member {MANIFEST_NAME!r}; it is not a kinetome bundle")
    return manifest, staged


def _match_manifest(manifest: Manifest, staged: dict[str, tuple[Path, int]]) -> None:
    """Every manifest blob has a member of the listed size, and every member is listed."""
    for digest in staged:
        if digest not in manifest.blobs:
            raise BundleError(f"member 'blobs/{digest}' is not listed in {MANIFEST_NAME}; refused")
    for digest, size in manifest.blobs.items():
        if digest not in staged:
            users = [f"{v.ref} {e.role}" for v in manifest.versions for e in v.files if e.digest == digest]
            users += [
                f"{v.ref}/{m.kind}#{m.revision} {e.role}"
                for v in manifest.versions
                for m in v.models
                for e in m.files
                if e.digest == digest
            ]
            raise BundleError(
                f"{MANIFEST_NAME} lists blob {digest} (used by {', '.join(users)}) but the archive has no "
                f"member 'blobs/{digest}'; refused"
            )
        if staged[digest][1] != size:
            raise BundleError(
                f"member 'blobs/{digest}' has {staged[digest][1]} bytes but {MANIFEST_NAME} says {size}; refused"
            )


# -- import: writing -------------------------------------------------------------------


def _imported_meta(bv: BundleVersion) -> str:
    meta = dict(bv.meta)
    origin = {"ref": bv.ref, "parent": bv.parent, "reason": bv.reason, "created_at": bv.created_at}
    if "imported_from" in meta:
        origin["previous"] = meta["imported_from"]
    meta["imported_from"] = origin
    return canonical_meta(meta)


def _commit(store: Store, manifest: Manifest, staged: dict[str, tuple[Path, int]]) -> list[VersionRecord]:
    for digest, (path, _) in staged.items():
        store._blobs.adopt(path, digest)
    rows: dict[str, int] = {}
    with write_transaction(store._conn) as conn:
        for bv in manifest.versions:
            row = index.find_by_content(conn, bv.name, index.content_key({e.role: e.digest for e in bv.files}))
            if row is None:
                row = index.insert_version(
                    conn,
                    name=bv.name,
                    files=bv.files,
                    parent_id=rows.get(bv.parent) if bv.parent is not None else None,
                    reason="imported",
                    meta_json=_imported_meta(bv),
                    created_at=index.utc_now(),
                )
                for text, created_at in bv.notes:
                    index.insert_note(conn, row, text, created_at)
            rows[bv.ref] = row
            for bm in sorted(bv.models, key=lambda m: (m.kind, m.revision)):
                key = index.content_key({e.role: e.digest for e in bm.files})
                if index.find_model_by_content(conn, row, bm.kind, key, latest_only=False) is None:
                    meta = dict(bm.meta)
                    meta["imported_from"] = {"ref": f"{bv.ref}/{bm.kind}#{bm.revision}", "created_at": bm.created_at}
                    index.insert_model(
                        conn,
                        version_row=row,
                        kind=bm.kind,
                        files=bm.files,
                        meta_json=canonical_meta(meta),
                        created_at=index.utc_now(),
                    )
    return [store._load_id(rows[bv.ref]) for bv in manifest.versions]


def import_bundle(
    store: Store,
    path: str | os.PathLike,
    *,
    max_member_bytes: int = MAX_MEMBER_BYTES,
    max_total_bytes: int = MAX_TOTAL_BYTES,
    max_members: int = MAX_MEMBERS,
) -> list[VersionRecord]:
    """Import a bundle; returns the store's versions for the bundle's versions, parents first.

    A version whose files already exist under its name is reused; others get the next
    free number, reason ``imported``, and ``meta["imported_from"]`` with the original
    ref, parent, reason and time. Any BundleError leaves the store unchanged.
    """
    source = Path(path).expanduser()
    if not source.is_file():
        raise BundleError(f"bundle {source} must be an existing file, got a missing path; check the path")
    store._blobs.create()
    staging = Path(tempfile.mkdtemp(prefix="import-", dir=store._blobs.tmp))
    try:
        manifest_bytes, staged = _read_archive(
            source, staging, max_member_bytes=max_member_bytes, max_total_bytes=max_total_bytes, max_members=max_members
        )
        manifest = parse_manifest(manifest_bytes)
        _match_manifest(manifest, staged)
        return _commit(store, manifest, staged)
    finally:
        shutil.rmtree(staging, ignore_errors=True)

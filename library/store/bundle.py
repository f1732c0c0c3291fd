"""Bundles: one tar (optionally gzip) archive of a version, its lineage, notes and artifacts, sealed.

Import never extracts: members are read one by one into a staging folder and checked
(paths, types, sizes, blob digests, the signature and the seal over the manifest, every identity and
artifact digest, and that the archive is byte for byte the canonical one) before
anything touches the store; then blobs are moved into place and the index changes in
one transaction. Imported versions keep their identity, number and origin.
"""

from __future__ import annotations

import io
import json
import os
import re
import shutil
import tarfile
import tempfile
import zlib
from dataclasses import dataclass
from pathlib import Path

from kinetome.library.errors import BundleError, InvalidInputError, SignatureError
from kinetome.library.file_modes import apply_umask
from kinetome.library.store import audit, index
from kinetome.library.store.bundle_tar import (
    ArchiveReader,
    GzipSink,
    bytes_member,
    canonical_sha256,
    check_member,
    copy_member,
    file_member,
    fsync_write,
    write_canonical_tar,
)
from kinetome.library.store.identity import lookup_key
from kinetome.library.store.manifest import (
    MANIFEST_NAME,
    SEAL_NAME,
    Manifest,
    build_manifest,
    build_seal,
    check_seal,
    manifest_format,
    parse_manifest,
)
from kinetome.library.store.metadata import canonical_json, canonical_meta
from kinetome.library.store.records import ImportReport
from kinetome.library.store.settings import requires_signatures
from kinetome.library.store.signing import SIGNATURE_NAME, SignatureCheck, SigningKey, build_signature, check_signature
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
_LAYOUT = f"a bundle holds only {SEAL_NAME}, {SIGNATURE_NAME} (if signed), {MANIFEST_NAME} and blobs/<sha256> as regular files"
_UNSEALED = (
    "bundle format 1 (made before sealed bundles): its blobs were checked against their digests, but its "
    "metadata (notes, timestamps, meta) carries no seal; export it again from this store to get a sealed bundle"
)


# -- export ----------------------------------------------------------------------------


def export_bundle(
    store: Store,
    ref: str,
    path: str | os.PathLike,
    *,
    with_lineage: bool = True,
    compress: bool | None = None,
    signing_key: SigningKey | None = None,
) -> Path:
    """Write ``ref`` (and, with lineage, all its ancestors) with their artifacts and notes to one archive.

    ``path`` is the archive file, or an existing folder to write ``<name>-<N>.kinetome.tar.gz`` into.
    ``compress=None`` gzips when the file name ends in ``.gz`` or ``.tgz``. Returns the written path.
    Every blob is re-hashed on the way out, so a damaged store cannot produce a bundle.
    With ``signing_key`` the bundle also carries an HMAC-SHA256 of its manifest under that key.
    """
    version = store.get(ref)
    chain = list(reversed(store.lineage(version.ref))) if with_lineage else [version]
    artifacts = [a for v in chain for a in store.artifacts(v.ref, all_revisions=True)]
    notes = {v.ref: store.notes(v.ref) for v in chain}
    current_for = {v.ref: store.current_tasks(v.ref) for v in chain}
    manifest = build_manifest(store.store_id, version.ref, chain, artifacts, notes, current_for)
    users: dict[str, tuple[int, str]] = {}
    for owner in [*chain, *artifacts]:
        for e in owner.files:
            users.setdefault(e.digest, (e.size, f"{owner.ref} {e.role}"))
    members = [bytes_member(SEAL_NAME, build_seal(manifest, version.identity))]
    if signing_key is not None:
        members.append(bytes_member(SIGNATURE_NAME, build_signature(manifest, signing_key)))
    members.append(bytes_member(MANIFEST_NAME, manifest))
    for digest in sorted(users):
        size, used_by = users[digest]
        data = store._blobs.read(digest, size=size, used_by=used_by)
        members.append(bytes_member(f"blobs/{digest}", data))
    return _write_archive(_target(path, version.name, version.number), members, compress)


def _target(path: str | os.PathLike, name: str, number: int) -> Path:
    target = Path(path).expanduser()
    if target.is_dir():
        target = target / f"{name}-{number}.kinetome.tar.gz"
    if not target.parent.is_dir():
        raise InvalidInputError(f"bundle folder {target.parent} must exist, got a missing folder; create it first")
    return target


def _write_archive(target: Path, members: list, compress: bool | None) -> Path:
    if compress is None:
        compress = target.name.endswith((".gz", ".tgz"))
    fd, tmp_name = tempfile.mkstemp(prefix=".kinetome-bundle-", dir=target.parent)
    try:
        apply_umask(fd)
        with os.fdopen(fd, "wb") as raw:
            sink = GzipSink(raw) if compress else raw
            write_canonical_tar(sink, members)
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


@dataclass
class _Archive:
    seal: bytes | None
    signature: bytes | None
    manifest: bytes | None
    staged: dict[str, tuple[Path, int]]  # digest -> (staged file, size)
    tar_sha256: str


@dataclass(frozen=True)
class _Limits:
    member: int
    total: int
    members: int


_READ_ERRORS = (tarfile.TarError, OSError, EOFError, zlib.error)


def _read_archive(source: Path, staging: Path, limits: _Limits) -> _Archive:
    with open(source, "rb") as raw:
        reader = ArchiveReader(raw, source)
        try:
            tar = tarfile.open(fileobj=reader, mode="r|")  # type: ignore[call-overload]
        except _READ_ERRORS as e:
            raise BundleError(
                f"{source} is not a readable tar or tar.gz archive ({e}); export it again with `kinetome export`"
            ) from None
        archive = _Archive(None, None, None, {}, "")
        with tar:
            _read_members(source, tar, staging, limits, archive)
        try:
            reader.finish()
        except _READ_ERRORS as e:
            raise BundleError(f"{source} is damaged at its end ({e}); export it again") from None
        archive.tar_sha256 = reader.sha256.hexdigest()
    if archive.manifest is None:
        raise BundleError(f"{source} has no member {MANIFEST_NAME!r}; it is not a kinetome bundle")
    return archive


def _read_members(source: Path, tar: tarfile.TarFile, staging: Path, limits: _Limits, archive: _Archive) -> None:
    seen: set[str] = set()
    total = 0
    last = "(start of archive)"
    while True:
        try:
            member = tar.next()
        except _READ_ERRORS as e:
            raise BundleError(f"{source} is damaged after member {last!r} ({e}); export it again") from None
        if member is None:
            return
        if len(seen) >= limits.members:
            raise BundleError(f"{source} has more than {limits.members} members; refused")
        check_member(member, limits.member)
        name = member.name
        if name in seen:
            raise BundleError(f"member {name!r} appears twice in the archive; refused")
        seen.add(name)
        total += member.size
        if total > limits.total:
            raise BundleError(
                f"member {name!r} brings the archive to {total} bytes, over the total limit of {limits.total}; refused"
            )
        try:
            _read_member(tar, member, staging, archive)
        except _READ_ERRORS as e:
            raise BundleError(f"member {name!r} could not be read ({e}); the archive is damaged") from None
        last = name


def _read_member(tar: tarfile.TarFile, member: tarfile.TarInfo, staging: Path, archive: _Archive) -> None:
    name = member.name
    if name in (MANIFEST_NAME, SEAL_NAME, SIGNATURE_NAME):
        if member.size > MAX_MANIFEST_BYTES:
            raise BundleError(f"member {name!r} is {member.size} bytes, over the limit of {MAX_MANIFEST_BYTES}; refused")
        buf = io.BytesIO()
        copy_member(tar, member, buf)
        field = {MANIFEST_NAME: "manifest", SEAL_NAME: "seal", SIGNATURE_NAME: "signature"}[name]
        setattr(archive, field, buf.getvalue())
    elif match := _BLOB_MEMBER_RE.fullmatch(name):
        digest = match.group(1)
        path = staging / f"{len(archive.staged):06d}"
        actual, size = fsync_write(path, lambda f: copy_member(tar, member, f))
        if actual != digest:
            raise BundleError(
                f"member {name!r} does not match its name: its content has sha256 {actual}; "
                "the archive is damaged or was altered"
            )
        archive.staged[digest] = (path, size)
    else:
        raise BundleError(f"member {name!r} is not listed in {MANIFEST_NAME}; refused ({_LAYOUT})")


def _match_manifest(manifest: Manifest, staged: dict[str, tuple[Path, int]]) -> None:
    """Every manifest blob has a member of the listed size, and every member is listed."""
    for digest in staged:
        if digest not in manifest.blobs:
            raise BundleError(f"member 'blobs/{digest}' is not listed in {MANIFEST_NAME}; refused")
    for digest, size in manifest.blobs.items():
        if digest not in staged:
            users = [f"{o.ref} {e.role}" for o in [*manifest.versions, *manifest.artifacts] for e in o.files if e.digest == digest]
            raise BundleError(
                f"{MANIFEST_NAME} lists blob {digest} (used by {', '.join(users)}) but the archive has no "
                f"member 'blobs/{digest}'; refused"
            )
        if staged[digest][1] != size:
            raise BundleError(
                f"member 'blobs/{digest}' has {staged[digest][1]} bytes but {MANIFEST_NAME} says {size}; refused"
            )


def _check_archive(source: Path, archive: _Archive, signatures: _Signatures) -> tuple[Manifest, SignatureCheck, list[str]]:
    """Signature, seal, manifest, blobs and the canonical form of the whole archive;
    returns (manifest, what the signature check found, warnings)."""
    assert archive.manifest is not None
    sealed = manifest_format(archive.manifest) >= 2
    for member, content in ((SEAL_NAME, archive.seal), (SIGNATURE_NAME, archive.signature)):
        if not sealed and content is not None:
            raise BundleError(f"member {member!r} is not part of a format-1 bundle; the bundle was altered")
    signed = check_signature(archive.signature, archive.manifest, signatures.key, required=signatures.required)
    if sealed:
        check_seal(archive.seal, archive.manifest)
    manifest = parse_manifest(archive.manifest)
    _match_manifest(manifest, archive.staged)
    members = [bytes_member(SEAL_NAME, archive.seal)] if sealed and archive.seal is not None else []
    if archive.signature is not None:
        members.append(bytes_member(SIGNATURE_NAME, archive.signature))
    members.append(bytes_member(MANIFEST_NAME, archive.manifest))
    members += [file_member(f"blobs/{d}", archive.staged[d][0], archive.staged[d][1]) for d in sorted(archive.staged)]
    if canonical_sha256(members) != archive.tar_sha256:
        raise BundleError(
            f"{source} is not byte for byte the bundle its members describe (a header field, padding, the member "
            "order or trailing bytes were changed); refused: export it again"
        )
    warnings = ([] if sealed else [_UNSEALED]) + ([signed.warning] if signed.warning else [])
    return manifest, signed, warnings


@dataclass(frozen=True)
class _Signatures:
    key: SigningKey | None  # the key to check a signature with
    required: bool  # the store refuses bundles it cannot verify


# -- import: planning and writing ------------------------------------------------------


@dataclass(frozen=True)
class _Step:
    index: int  # position in manifest.versions
    row: int | None  # existing row with this identity
    number: int | None  # number to insert under (None: reuse ``row``)


def _conflict(store: Store, bv, row: int) -> BundleError:
    local = store._load_id(row)
    return BundleError(
        f"{bv.ref} in the bundle (identity {bv.identity[:12]}) conflicts with {local.ref} here (identity "
        f"{local.identity[:12]}): this store has another version under that number; nothing was imported. "
        "Import with --renumber to store it under the next free number (its identity and origin stay), "
        "or import it into another store"
    )


def _plan(store: Store, manifest: Manifest, renumber: bool) -> list[_Step]:
    """Which bundle versions exist here (by identity) and the number each new one gets."""
    conn = store._index
    steps: list[_Step] = []
    planned: set[tuple[str, int]] = set()
    in_bundle = {(v.name, v.number) for v in manifest.versions}
    for i, bv in enumerate(manifest.versions):
        row = index.find_by_identity(conn, bv.identity)
        if row is not None:
            steps.append(_Step(i, row, None))
            continue
        taken = index.version_id(conn, bv.name, bv.number)
        number = bv.number
        if taken is not None:
            if not renumber:
                raise _conflict(store, bv, taken)
            number = max(index.numbers_of(conn, bv.name)) + 1
            while (bv.name, number) in planned or (bv.name, number) in in_bundle:
                number += 1
        planned.add((bv.name, number))
        steps.append(_Step(i, None, number))
    return steps


def _origin(manifest: Manifest, thing) -> str:
    origin = thing.origin or {"store": manifest.store_id, "ref": thing.ref, "created_at": thing.created_at}
    return canonical_json(origin)


def _insert_versions(
    store: Store, manifest: Manifest, steps: list[_Step], source: str, signed: SignatureCheck
) -> tuple[dict[str, int], list[int]]:
    conn = store._index
    rows: dict[str, int] = {}
    added: list[int] = []
    for step in steps:
        bv = manifest.versions[step.index]
        row = step.row
        if row is None:
            parent_id = rows.get(bv.parent) if bv.parent in rows else None
            if parent_id is None and bv.parent_identity is not None:
                parent_id = index.find_by_identity(conn, bv.parent_identity)
            now, origin = index.utc_now(), _origin(manifest, bv)
            row = index.insert_version(
                conn, name=bv.name, number=step.number, files=bv.files, parent_id=parent_id,
                parent_identity=bv.parent_identity, reason=bv.reason, identity=bv.identity,
                origin_json=origin, meta_json=canonical_meta(bv.meta), created_at=now,
            )
            audit.append_entry(
                conn, "imported", name=bv.name, subject=f"{bv.name}@{step.number}", created_at=now,
                detail={
                    "identity": bv.identity, "reason": bv.reason, "origin": json.loads(origin), "bundle": source,
                    "signature": signed.to_dict(),
                },
            )
            for text, created_at in bv.notes:
                index.insert_note(conn, row, text, created_at)
            added.append(row)
        rows[bv.ref] = row
    return rows, added


def _insert_artifacts(store: Store, manifest: Manifest, rows: dict[str, int]) -> None:
    conn = store._index
    for ba in sorted(manifest.artifacts, key=lambda a: (a.owner, a.kind, a.revision)):
        row = rows[ba.owner]
        if index.find_artifact_by_content(conn, row, ba.kind, files_key="", lookup="", digest=ba.digest) is not None:
            continue
        revisions = [a.revision for a in index.load_artifacts(conn, "a.version_id = ? AND a.kind = ?", (row, ba.kind))]
        index.insert_artifact(
            conn, version_row=row, kind=ba.kind, files=ba.files, computed_on_json=canonical_json(list(ba.computed_on)),
            task_json=canonical_json(ba.task), settings_json=canonical_json(ba.settings),
            software_json=canonical_json(ba.software), meta_json=canonical_json(ba.meta),
            lookup=lookup_key(ba.kind, ba.computed_on, ba.task, ba.settings), digest=ba.digest,
            created_at=index.utc_now(), origin_json=_origin(manifest, ba),
            revision=None if ba.revision in revisions else ba.revision,
        )


def _set_currents(store: Store, manifest: Manifest, rows: dict[str, int]) -> list[str]:
    """Tasks the bundle's versions were current for become current here where nothing is current yet."""
    conn = store._index
    done = []
    for bv in manifest.versions:
        for task in bv.current_for:
            if index.current_row(conn, bv.name, task) is None:
                evidence = canonical_json({"store": manifest.store_id, "ref": bv.ref})
                index.insert_current(
                    conn, name=bv.name, task=task, version_row=rows[bv.ref], reason="imported",
                    evidence_json=evidence, created_at=index.utc_now(),
                )
                done.append(f"{store._load_id(rows[bv.ref]).ref} for {task}")
    return done


def _commit(
    store: Store, manifest: Manifest, staged: dict[str, tuple[Path, int]], renumber: bool, source: str, signed: SignatureCheck
) -> tuple:
    _plan(store, manifest, renumber)  # refuse conflicts before any blob is written
    for digest, (path, _) in staged.items():
        store._blobs.adopt(path, digest)
    with store._index.write_transaction():
        if signed.status != "verified" and requires_signatures(store._index):  # turned on while this import ran
            raise SignatureError(
                "this store began requiring signed bundles while the bundle was being checked, and it is "
                f"{signed.status}: refused; import it again with the team's key (--signing-key FILE)"
            )
        rows, added = _insert_versions(store, manifest, _plan(store, manifest, renumber), source, signed)
        _insert_artifacts(store, manifest, rows)
        currents = _set_currents(store, manifest, rows)
    return rows, added, currents


def import_bundle(
    store: Store,
    path: str | os.PathLike,
    *,
    renumber: bool = False,
    max_member_bytes: int = MAX_MEMBER_BYTES,
    max_total_bytes: int = MAX_TOTAL_BYTES,
    max_members: int = MAX_MEMBERS,
    signing_key: SigningKey | None = None,
) -> ImportReport:
    """Import a bundle; versions already here (same identity) are reused, new ones keep their
    number, identity, reason and origin. A number taken here by another version is refused
    unless ``renumber`` (then the next free number). A signed bundle is checked with ``signing_key``
    (refused when signed with another key or changed after signing); where the store requires
    signatures, an unsigned bundle or one without a key to check it is refused (``SignatureError``).
    Any BundleError leaves the store unchanged.
    """
    source = Path(path).expanduser()
    if not source.is_file():
        raise BundleError(f"bundle {source} must be an existing file, got a missing path; check the path")
    store.check_writable()
    staging = Path(tempfile.mkdtemp(prefix="import-", dir=store._blobs.staging_dir()))
    try:
        signatures = _Signatures(signing_key, requires_signatures(store._index))
        archive = _read_archive(source, staging, _Limits(max_member_bytes, max_total_bytes, max_members))
        manifest, signed, warnings = _check_archive(source, archive, signatures)
        rows, added, currents = _commit(store, manifest, archive.staged, renumber, source.name, signed)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return ImportReport(
        versions=tuple(store._load_id(rows[bv.ref]) for bv in manifest.versions),
        added=tuple(store._load_id(r).ref for r in added),
        currents_set=tuple(currents),
        root_identity=manifest.root_identity,
        warnings=tuple(warnings),
        signature=signed.status,
        signed_with=signed.key_id,
    )

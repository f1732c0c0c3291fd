"""``Store``: immutable skill versions with lineage, current versions per task, notes, artifacts and an
audit log, over an index backend (SQLite file or PostgreSQL database) and a blob store (folder or S3)."""

from __future__ import annotations

import difflib
import os
from collections.abc import Mapping
from pathlib import Path

from kinetome.library.errors import InvalidInputError, NotFoundError, StoreIntegrityError
from kinetome.library.fault_points import fault_point
from kinetome.library.store import audit, index
from kinetome.library.store.blobs import BlobStore, open_blobs
from kinetome.library.store.identity import version_identity
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.location import check_database_url, is_database_url
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.names import NOMINAL_TASK, format_ref, parse_pin, parse_ref, validate_name, validate_role, validate_task
from kinetome.library.store.settings import requires_signatures, set_require_signatures, store_settings
from kinetome.library.store.records import REASONS, AddResult, FileEntry, Note, SkillSummary, VersionRecord
from kinetome.library.store.store_artifacts import ArtifactMethods
from kinetome.library.store.store_currents import CurrentMethods
from kinetome.library.store.verify import VerifyReport, verify_store

__all__ = ["Store", "INDEX_NAME", "MAX_NOTE_CHARS"]

INDEX_NAME = "index.sqlite"
MAX_NOTE_CHARS = 65536


def _number_ranges(numbers: list[int]) -> str:
    """``[1, 2, 3, 5]`` -> ``"1-3, 5"``."""
    parts: list[str] = []
    start = prev = numbers[0]
    for n in numbers[1:] + [None]:  # type: ignore[list-item]
        if n is not None and n == prev + 1:
            prev = n
            continue
        parts.append(str(start) if start == prev else f"{start}-{prev}")
        if n is not None:
            start = prev = n
    return ", ".join(parts)


def check_files(files: object, *, what: str) -> dict[str, bytes]:
    """Validate a role -> bytes mapping; returns plain bytes values."""
    if not isinstance(files, Mapping) or not files:
        raise InvalidInputError(
            f"{what} must be a non-empty dict of role -> bytes, got {files!r:.80}; "
            "pass e.g. {'spec.json': b'...', 'params.safetensors': b'...'}"
        )
    out: dict[str, bytes] = {}
    for role, data in files.items():
        validate_role(role)
        if not isinstance(data, (bytes, bytearray, memoryview)):
            raise InvalidInputError(
                f"{what}[{role!r}] must be bytes, got {type(data).__name__}; read files with Path.read_bytes()"
            )
        out[role] = bytes(data)
    return out


def _open_folder(root: Path, *, blobs: object, create: bool) -> IndexBackend:
    """The SQLite index of a store folder (created with the folder if ``create``)."""
    from kinetome.library.store.sqlite_index import SqliteIndex

    if root.exists() and not root.is_dir():
        raise InvalidInputError(f"store root must be a folder, got the file {root}; pass a folder path to --store")
    path = root / INDEX_NAME
    if not path.exists():
        if not create:
            raise NotFoundError(
                f"no kinetome store at {root} ({INDEX_NAME} is missing); "
                "check --store / $KINETOME_STORE, or register a skill to create one"
            )
        root.mkdir(parents=True, exist_ok=True)
    found = SqliteIndex(path, create=create)
    if blobs is not None and index.store_info(found, "blobs") is None and not found.execute("SELECT 1 FROM versions LIMIT 1").fetchone():
        with found.write_transaction():  # a new store records where its blobs are
            index.set_store_info(found, "blobs", _absolute(blobs))
    return found


def _open_database(url: str, *, blobs: object, create: bool, read_only: bool = False) -> IndexBackend:
    """The PostgreSQL index at ``url``; creating one records its blob location, so it needs one.
    For reading only, the light connection (``pg_reader``) where it can read as the full driver does."""
    if read_only:
        from kinetome.library.store.pg_reader import open_reader

        try:
            reader = open_reader(url)
        except NotFoundError:
            if not create:
                raise
            reader = None  # no store there yet: the full driver creates it (or explains what is missing)
        if reader is not None:
            return reader
    from kinetome.library.store.pg_index import PostgresIndex

    try:
        return PostgresIndex(url, create=create and blobs is not None, info=None if blobs is None else {"blobs": _absolute(blobs)})
    except NotFoundError:
        if create and blobs is None:
            raise InvalidInputError(
                f"there is no store at {url} yet, and creating one needs a blob location, got none; "
                "pass --blobs with a shared folder or s3://bucket/prefix (or set $KINETOME_BLOBS)"
            ) from None
        raise


def _absolute(blobs: object) -> str:
    """A blob location as it is recorded: URLs as given, folders as absolute paths."""
    text = str(blobs)
    return text if "://" in text else str(Path(text).expanduser().resolve())


class Store(CurrentMethods, ArtifactMethods):
    """A store: an index plus content-addressed blobs.

    ``Store(folder)`` is the embedded store (``index.sqlite`` and ``blobs/<aa>/<sha256>`` in the
    folder, no server); ``Store("postgresql://host/db", blobs=...)`` keeps its index in a
    PostgreSQL database and its blobs in a shared folder or ``s3://bucket/prefix``. The blob
    location given when a store is created is recorded in it; ``blobs=`` overrides it (e.g. a
    shared folder mounted elsewhere on this machine).

    Versions, artifacts and current-version events are only ever added. Each add
    writes its blobs first (atomically) and then its index rows in one transaction,
    so a killed add leaves at most unused blobs, never a partial version.

    ``read_only=True`` is for callers that only read (``list``, ``show``): every change
    raises InvalidInputError, and a PostgreSQL index is read through libpq directly
    instead of the full driver, which is much slower to import. Opening still creates a
    missing store when ``create`` says so.
    """

    def __init__(
        self,
        location: str | os.PathLike,
        *,
        blobs: str | os.PathLike | None = None,
        create: bool = True,
        read_only: bool = False,
    ):
        self.root: Path | None = None
        if is_database_url(location):
            self.location = check_database_url(str(location))
            self._index = _open_database(self.location, blobs=blobs, create=create, read_only=read_only)
        else:
            self.root = Path(location).expanduser()
            self.location = str(self.root)
            self._index = _open_folder(self.root, blobs=blobs, create=create)
        try:
            info = index.store_infos(self._index, "blobs", "store_id")
            self._blobs: BlobStore = open_blobs(blobs if blobs is not None else info.get("blobs") or self.root)
            self._blobs.create()
            self.store_id = info.get("store_id", "")
        except BaseException:
            self._index.close()
            raise
        self._index.read_only = self._index.read_only or read_only

    @property
    def index_path(self) -> Path:
        """The SQLite file of an embedded store."""
        if self.root is None:
            raise InvalidInputError(f"the store at {self.location} keeps its index on a database server, not in a file")
        return self.root / INDEX_NAME

    @property
    def blobs_location(self) -> str:
        """Where this store's blobs are: a folder path or a URL."""
        return self._blobs.location

    @property
    def backend(self) -> str:
        """``sqlite`` or ``postgresql``."""
        return self._index.dialect

    # -- lifecycle ---------------------------------------------------------------------

    def close(self) -> None:
        self._index.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Store({self.location!r})"

    # -- lookups -----------------------------------------------------------------------

    def _not_found(self, name: str, number: int | None) -> NotFoundError:
        numbers = index.numbers_of(self._index, name)
        if numbers:
            return NotFoundError(
                f"{format_ref(name, number or 0)} does not exist; {name} has versions "
                f"{_number_ranges(numbers)} (latest {format_ref(name, numbers[-1])})"
            )
        names = index.all_names(self._index)
        close = difflib.get_close_matches(name, names, n=3, cutoff=0.6)
        if close:
            hint = "did you mean " + " or ".join(repr(c) for c in close) + "?"
        elif names:
            hint = f"the store holds {len(names)} other skill(s); run `kinetome list` to see them"
        else:
            hint = "the store is empty; register a skill first"
        return NotFoundError(f"no skill named {name!r} in the store at {self.location}; {hint}")

    def _row_id(self, ref: str, task: str | None = None) -> int:
        """The index row of ``ref`` (see ``get``), without loading the version."""
        pin = parse_pin(ref)
        if pin.identity is not None:
            row_id = self._identity_row(pin.name, pin.identity)
        elif pin.number is not None:
            row_id = index.version_id(self._index, pin.name, pin.number)
        else:
            row_id = self._current_or_latest(pin.name, task)
        if row_id is None:
            raise self._not_found(pin.name, pin.number)
        return row_id

    def _row(self, ref: str, task: str | None = None) -> tuple[int, VersionRecord]:
        """(row, version) of ``ref``; ``name@N`` is looked up and loaded in one go (fewer round trips to a server)."""
        pin = parse_pin(ref)
        if pin.number is not None:
            found = index.load_versions(self._index, "v.name = ? AND v.number = ?", (pin.name, pin.number))
            if not found:
                raise self._not_found(pin.name, pin.number)
            return found[0]
        row_id = self._row_id(ref, task)
        return row_id, self._load_id(row_id)

    def _identity_row(self, name: str, prefix: str) -> int:
        rows = index.find_by_identity_prefix(self._index, name, prefix)
        if not rows:
            raise NotFoundError(
                f"no version of {name} has identity {prefix}; `kinetome lineage {name}` lists its versions and identities"
            )
        if len(rows) > 1:
            refs = ", ".join(self._load_id(r).ref for r in rows)
            raise InvalidInputError(f"identity prefix {prefix} of {name} matches {refs}; give more hex characters")
        return rows[0]

    def _current_or_latest(self, name: str, task: str | None) -> int | None:
        """The current version for ``task``, else for nominal, else the newest version."""
        for t in dict.fromkeys([validate_task(task) if task is not None else NOMINAL_TASK, NOMINAL_TASK]):
            row = index.current_row(self._index, name, t)
            if row is not None:
                return row
        return index.latest_row(self._index, name)

    def _load_id(self, row_id: int) -> VersionRecord:
        return index.load_versions(self._index, "v.id = ?", (row_id,))[0][1]

    def get(self, ref: str, *, task: str | None = None) -> VersionRecord:
        """The version ``name@N`` or ``name@id:HEX``; for a bare ``name`` the current version for
        ``task`` (default nominal), else the current one for nominal, else the newest."""
        return self._row(ref, task)[1]

    def exists(self, ref: str) -> bool:
        try:
            self._row_id(ref)
        except NotFoundError:
            return False
        return True

    def read_file(self, version: VersionRecord | str, role: str) -> bytes:
        """The bytes of one file of a version, re-hashed (StoreIntegrityError if damaged)."""
        record = self.get(version) if isinstance(version, str) else version
        entry = record.file(role)
        return self._blobs.read(entry.digest, size=entry.size, used_by=f"{record.ref} {role}")

    def list_skills(self) -> list[SkillSummary]:
        """One summary per skill name, sorted by name.

        description/env come from the newest version whose meta holds them as text
        (a newer version whose meta omits them keeps showing an older version's).
        """
        return [
            SkillSummary(
                name=name,
                latest=int(number),
                count=int(count),
                latest_created_at=created_at,
                description=description,
                env=env,
                current=None if current is None else int(current),
            )
            for name, number, count, created_at, description, env, current in index.skill_summaries(self._index)
        ]

    def history(self, name: str) -> list[VersionRecord]:
        """Every version of a skill, oldest first (a ref's number is ignored)."""
        bare, _ = parse_ref(name)
        found = index.load_versions(self._index, "v.name = ?", (bare,))
        if not found:
            raise self._not_found(bare, None)
        return [record for _, record in found]

    def lineage(self, ref: str) -> list[VersionRecord]:
        """The version itself, then its parent, grandparent ... up to the root (across names)."""
        row_id, record = self._row(ref)
        chain = [record]
        seen = {row_id}
        while True:
            parent = index.parent_row(self._index, row_id)
            if parent is None:
                return chain
            if parent in seen:
                raise StoreIntegrityError(f"lineage of {ref} loops back to {chain[-1].ref}; the index is damaged")
            seen.add(parent)
            row_id = parent
            chain.append(self._load_id(row_id))

    def children(self, ref: str) -> list[VersionRecord]:
        """Versions whose parent is ``ref`` (any name)."""
        row_id = self._row_id(ref)
        return [r for _, r in index.load_versions(self._index, "v.parent_id = ?", (row_id,))]

    # -- adding ------------------------------------------------------------------------

    def check_writable(self) -> None:
        """Raise InvalidInputError if this store was opened with ``read_only=True`` (before any blob is written)."""
        self._index.check_writable()

    def _store_files(self, payload: dict[str, bytes]) -> tuple[FileEntry, ...]:
        self.check_writable()
        entries = tuple(FileEntry(role, self._blobs.put(data), len(data)) for role, data in sorted(payload.items()))
        fault_point("store.blobs-written")  # blobs in place, no index row yet
        return entries

    def _insert(
        self, conn, name: str, entries: tuple[FileEntry, ...], parent_id: int | None, reason: str, meta_json: str, **detail
    ) -> int:
        """Insert the next version of ``name`` and its audit entry (inside a write transaction)."""
        parent = None if parent_id is None else self._load_id(parent_id)
        parent_identity = None if parent is None else parent.identity
        digests = {e.role: e.digest for e in entries}
        identity = version_identity(name, digests, parent_identity=parent_identity, reason=reason)
        now = index.utc_now()
        row_id = index.insert_version(
            conn,
            name=name,
            files=entries,
            parent_id=parent_id,
            parent_identity=parent_identity,
            reason=reason,
            identity=identity,
            meta_json=meta_json,
            created_at=now,
        )
        ref = self._load_id(row_id).ref
        audit.append_entry(
            conn, reason, name=name, subject=ref, created_at=now,
            detail={"identity": identity, "parent": None if parent is None else parent.ref, **detail},
        )
        fault_point("store.version-row-uncommitted")  # row written inside the open transaction
        return row_id

    def add(
        self,
        name: str,
        files: Mapping[str, bytes],
        *,
        parent: str | None = None,
        reason: str = "registered",
        meta: Mapping | None = None,
    ) -> AddResult:
        """Add ``name@(highest+1)`` holding ``files`` (role -> bytes); current versions do not change.

        If a version of ``name`` already has exactly these role -> content pairs, it
        is returned with ``is_new=False`` and nothing changes (parent, reason and
        meta of the call are then ignored).
        """
        validate_name(name)
        if reason not in REASONS:
            raise InvalidInputError(f"reason must be one of {', '.join(REASONS)}, got {reason!r}")
        if reason in ("retrained", "revised", "initiation-learned") and parent is None:
            raise InvalidInputError(f"a {reason} version needs its parent, got parent=None; pass parent='name@N'")
        meta_json = canonical_meta(meta)
        payload = check_files(files, what="files")
        # Versions are never deleted, so a parent found now still exists at commit time.
        parent_id = None if parent is None else self._row_id(parent)
        entries = self._store_files(payload)
        key = index.content_key({e.role: e.digest for e in entries})
        with self._index.write_transaction() as conn:
            existing = index.find_by_content(conn, name, key)
            if existing is not None:
                return AddResult(self._load_id(existing), False)
            row_id = self._insert(conn, name, entries, parent_id, reason, meta_json)
        return AddResult(self._load_id(row_id), True)

    def register(self, name: str, files: Mapping[str, bytes], *, meta: Mapping | None = None) -> AddResult:
        """Store a spec's version and make it current for the nominal task.

        The first version of a name is ``registered``; a changed spec under an existing
        name is ``revised`` with the nominal current version (else the newest) as parent.
        Identical content returns the existing version and changes nothing.
        """
        validate_name(name)
        meta_json = canonical_meta(meta)
        entries = self._store_files(check_files(files, what="files"))
        key = index.content_key({e.role: e.digest for e in entries})
        with self._index.write_transaction() as conn:
            existing = index.find_by_content(conn, name, key)
            if existing is not None:
                return AddResult(self._load_id(existing), False)
            parent_id = self._current_or_latest(name, None)
            reason = "registered" if parent_id is None else "revised"
            row_id = self._insert(conn, name, entries, parent_id, reason, meta_json, current_for=[NOMINAL_TASK])
            index.insert_current(
                conn, name=name, task=NOMINAL_TASK, version_row=row_id, reason=reason, evidence_json="{}", created_at=index.utc_now()
            )
        return AddResult(self._load_id(row_id), True)

    # -- notes -------------------------------------------------------------------------

    def add_note(self, ref: str, text: str) -> Note:
        """Append a timestamped note to a version (its files and meta stay unchanged)."""
        if not isinstance(text, str) or not text.strip():
            raise InvalidInputError(f"note text must be a non-empty string, got {text!r:.80}; write what you observed")
        if len(text) > MAX_NOTE_CHARS:
            raise InvalidInputError(
                f"note text must be at most {MAX_NOTE_CHARS} characters, got {len(text)}; attach long reports as a model file"
            )
        with self._index.write_transaction() as conn:
            row_id, record = self._row(ref)
            index.insert_note(conn, row_id, text, index.utc_now())
        return index.load_notes(self._index, row_id, record.ref)[-1]

    def notes(self, ref: str) -> list[Note]:
        row_id, record = self._row(ref)
        return index.load_notes(self._index, row_id, record.ref)

    # -- integrity ---------------------------------------------------------------------

    def audit_log(self, name: str | None = None) -> list[audit.AuditEntry]:
        """The audit log, oldest first: every entry, or those about skill ``name``."""
        return audit.load_entries(self._index, None if name is None else parse_ref(name)[0])

    def settings(self) -> dict[str, bool]:
        """This store's settings (``require_signatures``: imports must be signed with the team key)."""
        return store_settings(self._index)

    @property
    def requires_signatures(self) -> bool:
        return requires_signatures(self._index)

    def set_require_signatures(self, on: bool) -> bool:
        """Require signed bundles on import (or stop requiring them); audited. Returns whether it changed."""
        return set_require_signatures(self._index, bool(on))

    def verify(self) -> VerifyReport:
        """Re-hash every blob, recompute every identity and artifact digest from the index rows,
        and follow the audit log's chain of digests."""
        return verify_store(self._index, self._blobs, self.location)

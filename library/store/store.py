"""``Store``: immutable skill versions with lineage, notes and option models over one folder."""

from __future__ import annotations

import difflib
import json
import os
from collections.abc import Mapping
from pathlib import Path

from kinetome.library.errors import InvalidInputError, NotFoundError, StoreIntegrityError
from kinetome.library.store import index
from kinetome.library.store.blobs import BlobDir
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.names import format_ref, parse_ref, validate_kind, validate_name, validate_role
from kinetome.library.store.records import (
    REASONS,
    AddResult,
    FileEntry,
    ModelRecord,
    Note,
    SkillSummary,
    VersionRecord,
)
from kinetome.library.store.schema import connect, write_transaction
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


def _check_files(files: object, *, what: str) -> dict[str, bytes]:
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


class Store:
    """A store folder: ``index.sqlite`` plus ``blobs/<aa>/<sha256>``.

    Versions and model revisions are only ever added. Each add writes its blobs
    first (atomically) and then its index rows in one transaction, so a killed
    add leaves at most unused blobs, never a partial version.
    """

    def __init__(self, root: str | os.PathLike, *, create: bool = True):
        self.root = Path(root).expanduser()
        self.index_path = self.root / INDEX_NAME
        if self.root.exists() and not self.root.is_dir():
            raise InvalidInputError(f"store root must be a folder, got the file {self.root}; pass a folder path to --store")
        if not self.index_path.exists():
            if not create:
                raise NotFoundError(
                    f"no kinetome store at {self.root} ({INDEX_NAME} is missing); "
                    "check --store / $KINETOME_STORE, or register a skill to create one"
                )
            self.root.mkdir(parents=True, exist_ok=True)
        self._blobs = BlobDir(self.root)
        self._blobs.create()
        self._conn = connect(self.index_path, create=create)

    # -- lifecycle ---------------------------------------------------------------------

    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Store({str(self.root)!r})"

    # -- lookups -----------------------------------------------------------------------

    def _not_found(self, name: str, number: int | None) -> NotFoundError:
        numbers = index.numbers_of(self._conn, name)
        if numbers:
            return NotFoundError(
                f"{format_ref(name, number or 0)} does not exist; {name} has versions "
                f"{_number_ranges(numbers)} (latest {format_ref(name, numbers[-1])})"
            )
        names = index.all_names(self._conn)
        close = difflib.get_close_matches(name, names, n=3, cutoff=0.6)
        if close:
            hint = "did you mean " + " or ".join(repr(c) for c in close) + "?"
        elif names:
            hint = f"the store holds {len(names)} other skill(s); run `kinetome list` to see them"
        else:
            hint = "the store is empty; register a skill first"
        return NotFoundError(f"no skill named {name!r} in the store at {self.root}; {hint}")

    def _row(self, ref: str) -> tuple[int, VersionRecord]:
        name, number = parse_ref(ref)
        if number is None:
            found = index.load_versions(
                self._conn, "v.name = ? AND v.number = (SELECT MAX(number) FROM versions WHERE name = ?)", (name, name)
            )
        else:
            found = index.load_versions(self._conn, "v.name = ? AND v.number = ?", (name, number))
        if not found:
            raise self._not_found(name, number)
        return found[0]

    def _load_id(self, row_id: int) -> VersionRecord:
        return index.load_versions(self._conn, "v.id = ?", (row_id,))[0][1]

    def get(self, ref: str) -> VersionRecord:
        """The version ``name@N``, or the latest one for a bare ``name``."""
        return self._row(ref)[1]

    def exists(self, ref: str) -> bool:
        try:
            self._row(ref)
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
        rows = self._conn.execute(
            "SELECT v.name, v.number, c.n, v.created_at,"
            " (SELECT json_extract(d.meta, '$.description') FROM versions d WHERE d.name = v.name"
            "   AND json_type(d.meta, '$.description') = 'text' ORDER BY d.number DESC LIMIT 1),"
            " (SELECT json_extract(e.meta, '$.env') FROM versions e WHERE e.name = v.name"
            "   AND json_type(e.meta, '$.env') = 'text' ORDER BY e.number DESC LIMIT 1)"
            " FROM versions v"
            " JOIN (SELECT name, MAX(number) AS top, COUNT(*) AS n FROM versions GROUP BY name) c"
            " ON c.name = v.name AND c.top = v.number ORDER BY v.name"
        ).fetchall()
        return [
            SkillSummary(
                name=name,
                latest=int(number),
                count=int(count),
                latest_created_at=created_at,
                description=description,
                env=env,
            )
            for name, number, count, created_at, description, env in rows
        ]

    def history(self, name: str) -> list[VersionRecord]:
        """Every version of a skill, oldest first (a ref's number is ignored)."""
        bare, _ = parse_ref(name)
        found = index.load_versions(self._conn, "v.name = ?", (bare,))
        if not found:
            raise self._not_found(bare, None)
        return [record for _, record in found]

    def lineage(self, ref: str) -> list[VersionRecord]:
        """The version itself, then its parent, grandparent ... up to the root (across names)."""
        row_id, record = self._row(ref)
        chain = [record]
        seen = {row_id}
        while True:
            parent = self._conn.execute("SELECT parent_id FROM versions WHERE id = ?", (row_id,)).fetchone()[0]
            if parent is None:
                return chain
            if parent in seen:
                raise StoreIntegrityError(f"lineage of {ref} loops back to {chain[-1].ref}; the index is damaged")
            seen.add(parent)
            row_id = int(parent)
            chain.append(self._load_id(row_id))

    def children(self, ref: str) -> list[VersionRecord]:
        """Versions whose parent is ``ref`` (any name)."""
        row_id, _ = self._row(ref)
        return [r for _, r in index.load_versions(self._conn, "v.parent_id = ?", (row_id,))]

    # -- adding ------------------------------------------------------------------------

    def _store_files(self, payload: dict[str, bytes]) -> tuple[FileEntry, ...]:
        return tuple(FileEntry(role, self._blobs.put(data), len(data)) for role, data in sorted(payload.items()))

    def add(
        self,
        name: str,
        files: Mapping[str, bytes],
        *,
        parent: str | None = None,
        reason: str = "registered",
        meta: Mapping | None = None,
    ) -> AddResult:
        """Add ``name@(latest+1)`` holding ``files`` (role -> bytes).

        If a version of ``name`` already has exactly these role -> content pairs, it
        is returned with ``created=False`` and nothing changes (parent, reason and
        meta of the call are then ignored).
        """
        validate_name(name)
        if reason not in REASONS:
            raise InvalidInputError(f"reason must be one of {', '.join(REASONS)}, got {reason!r}")
        if reason == "retrained" and parent is None:
            raise InvalidInputError("a retrained version needs its parent, got parent=None; pass parent='name@N'")
        meta_json = canonical_meta(meta)
        payload = _check_files(files, what="files")
        # Versions are never deleted, so a parent found now still exists at commit time.
        parent_id = None if parent is None else self._row(parent)[0]
        entries = self._store_files(payload)
        key = index.content_key({e.role: e.digest for e in entries})
        with write_transaction(self._conn) as conn:
            existing = index.find_by_content(conn, name, key)
            if existing is not None:
                created, row_id = False, existing
            else:
                row_id = index.insert_version(
                    conn,
                    name=name,
                    files=entries,
                    parent_id=parent_id,
                    reason=reason,
                    meta_json=meta_json,
                    created_at=index.utc_now(),
                )
                created = True
        return AddResult(self._load_id(row_id), created)

    # -- notes -------------------------------------------------------------------------

    def add_note(self, ref: str, text: str) -> Note:
        """Append a timestamped note to a version (its files and meta stay unchanged)."""
        if not isinstance(text, str) or not text.strip():
            raise InvalidInputError(f"note text must be a non-empty string, got {text!r:.80}; write what you observed")
        if len(text) > MAX_NOTE_CHARS:
            raise InvalidInputError(
                f"note text must be at most {MAX_NOTE_CHARS} characters, got {len(text)}; attach long reports as a model file"
            )
        with write_transaction(self._conn) as conn:
            row_id, record = self._row(ref)
            index.insert_note(conn, row_id, text, index.utc_now())
        return index.load_notes(self._conn, row_id, record.ref)[-1]

    def notes(self, ref: str) -> list[Note]:
        row_id, record = self._row(ref)
        return index.load_notes(self._conn, row_id, record.ref)

    # -- option models -----------------------------------------------------------------

    def attach_model(self, ref: str, kind: str, files: Mapping[str, bytes], meta: Mapping | None = None) -> ModelRecord:
        """Attach a new revision of option model ``kind`` to a version.

        Files identical to the latest revision of ``kind`` return that revision unchanged.
        """
        validate_kind(kind)
        meta_json = canonical_meta(meta)
        row_id, record = self._row(ref)
        entries = self._store_files(_check_files(files, what="model files"))
        key = index.content_key({e.role: e.digest for e in entries})
        with write_transaction(self._conn) as conn:
            model_id = index.find_model_by_content(conn, row_id, kind, key, latest_only=True)
            if model_id is None:
                model_id = index.insert_model(
                    conn, version_row=row_id, kind=kind, files=entries, meta_json=meta_json, created_at=index.utc_now()
                )
        return index.load_models(self._conn, "m.id = ?", (model_id,))[0]

    def models(self, ref: str, *, all_revisions: bool = False) -> list[ModelRecord]:
        """Models attached to a version: the latest revision of each kind, or every revision."""
        row_id, _ = self._row(ref)
        where = "m.version_id = ?"
        if not all_revisions:
            where += (
                " AND m.revision = (SELECT MAX(revision) FROM models m2"
                " WHERE m2.version_id = m.version_id AND m2.kind = m.kind)"
            )
        return index.load_models(self._conn, where, (row_id,))

    def get_model(self, ref: str, kind: str, *, revision: int | None = None) -> ModelRecord:
        """One model revision (the latest if ``revision`` is None)."""
        validate_kind(kind)
        row_id, record = self._row(ref)
        revisions = index.load_models(self._conn, "m.version_id = ? AND m.kind = ?", (row_id, kind))
        if not revisions:
            kinds = sorted({m.kind for m in self.models(record.ref)})
            have = ", ".join(kinds) if kinds else "none"
            raise NotFoundError(
                f"{record.ref} has no {kind!r} model; attached kinds: {have}; fit one with `kinetome fit-models {record.ref}`"
            )
        if revision is None:
            return revisions[-1]
        for m in revisions:
            if m.revision == revision:
                return m
        raise NotFoundError(
            f"{record.ref}/{kind}#{revision} does not exist; {kind} has revisions "
            f"{_number_ranges([m.revision for m in revisions])}"
        )

    def read_model(self, model: ModelRecord, role: str) -> bytes:
        """The bytes of one file of a model revision, re-hashed."""
        entry = model.file(role)
        return self._blobs.read(entry.digest, size=entry.size, used_by=f"{model.ref} {role}")

    # -- integrity ---------------------------------------------------------------------

    def verify(self) -> VerifyReport:
        """Re-hash every blob; name each version and model revision a bad blob breaks."""
        return verify_store(self._conn, self._blobs, self.root)

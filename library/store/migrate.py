"""Migrate a SQLite index of schema 1 (the first wave's stores) or 2 (before the audit log) to the current schema.

- versions get a content identity and their parent's identity; an ``imported`` version
  takes back its original reason and keeps where it came from as its origin;
- option-model revisions become artifacts computed on their version's identity;
- each skill's newest version becomes current for nominal (what unpinned references
  resolved to before), with reason ``migrated``;
- the store gets an id. A copy of the old index is kept as ``index.sqlite.schema1``.

Schema 2 only gains the (empty) audit log table.
"""

from __future__ import annotations

import json
import sqlite3
import uuid
from pathlib import Path
from typing import TYPE_CHECKING

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.store.identity import artifact_digest, content_key, lookup_key, version_identity
from kinetome.library.store.legacy import model_task_and_settings, reason_and_origin
from kinetome.library.store.metadata import canonical_json

if TYPE_CHECKING:
    from kinetome.library.store.sqlite_index import SqliteIndex

__all__ = ["migrate_index", "BACKUP_SUFFIX"]

BACKUP_SUFFIX = ".schema1"


def _backup(conn: sqlite3.Connection, path: Path) -> None:
    """A consistent copy of the schema-1 index beside it (written whole, then renamed)."""
    target = path.with_name(path.name + BACKUP_SUFFIX)
    if target.exists():
        return
    tmp = path.with_name(f".{path.name}.{uuid.uuid4().hex}.tmp")
    dest = sqlite3.connect(tmp)
    try:
        conn.backup(dest)
    finally:
        dest.close()
    tmp.replace(target)


def _files(conn: sqlite3.Connection, table: str, owner: str) -> dict[int, dict[str, str]]:
    out: dict[int, dict[str, str]] = {}
    for owner_id, role, digest in conn.execute(f"SELECT {owner}, role, digest FROM {table}"):
        out.setdefault(int(owner_id), {})[role] = digest
    return out


def _migrate_versions(conn: sqlite3.Connection) -> dict[int, str]:
    """Rebuild ``versions`` with identities, reasons and origins; returns row id -> identity."""
    files = _files(conn, "version_files", "version_id")
    rows = conn.execute(
        "SELECT id, name, number, parent_id, reason, meta, content_key, created_at FROM versions ORDER BY id"
    ).fetchall()
    create = _schema_statement("CREATE TABLE IF NOT EXISTS versions (")
    conn.execute(create.replace("CREATE TABLE IF NOT EXISTS versions (", "CREATE TABLE versions_new (", 1))
    identities: dict[int, str] = {}
    for vid, name, number, parent_id, reason, meta, key, created_at in rows:
        reason, origin = reason_and_origin(reason, json.loads(meta))
        parent_identity = identities.get(int(parent_id)) if parent_id is not None else None
        identity = version_identity(name, files.get(int(vid), {}), parent_identity=parent_identity, reason=reason)
        identities[int(vid)] = identity
        conn.execute(
            "INSERT INTO versions_new (id, name, number, parent_id, parent_identity, reason, identity, origin, meta,"
            " content_key, created_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (vid, name, number, parent_id, parent_identity, reason, identity,
             None if origin is None else canonical_json(origin), meta, key, created_at),
        )
    conn.execute("DROP TABLE versions")
    conn.execute("ALTER TABLE versions_new RENAME TO versions")
    return identities


def _migrate_models(conn: sqlite3.Connection, identities: dict[int, str]) -> None:
    """Every option-model revision becomes an artifact of the same kind and revision."""
    files = _files(conn, "model_files", "model_id")
    sizes = {(int(m), r): int(s) for m, r, s in conn.execute("SELECT model_id, role, size FROM model_files")}
    for mid, vid, kind, revision, meta, created_at in conn.execute(
        "SELECT id, version_id, kind, revision, meta, created_at FROM models ORDER BY id"
    ).fetchall():
        meta_obj = json.loads(meta)
        task, settings = model_task_and_settings(meta_obj)
        computed_on = [identities[int(vid)]]
        digests = files.get(int(mid), {})
        digest = artifact_digest(kind=kind, computed_on=computed_on, task=task, settings=settings, software={}, files=digests, meta=meta_obj)
        cur = conn.execute(
            "INSERT INTO artifacts (version_id, kind, revision, computed_on, task, settings, software, meta, lookup_key,"
            " digest, content_key, origin, created_at) VALUES (?, ?, ?, ?, ?, ?, '{}', ?, ?, ?, ?, NULL, ?)",
            (vid, kind, revision, canonical_json(computed_on), canonical_json(task), canonical_json(settings), meta,
             lookup_key(kind, computed_on, task, settings), digest, content_key(digests), created_at),
        )
        conn.executemany(
            "INSERT INTO artifact_files (artifact_id, role, digest, size) VALUES (?, ?, ?, ?)",
            [(cur.lastrowid, role, d, sizes[(int(mid), role)]) for role, d in digests.items()],
        )
    conn.execute("DROP TABLE model_files")
    conn.execute("DROP TABLE models")


def _schema_statement(prefix: str) -> str:
    from kinetome.library.store.schema import SCHEMA

    return next(s for s in SCHEMA if s.startswith(prefix))


def _set_currents(conn: sqlite3.Connection, now: str) -> None:
    evidence = canonical_json({"schema": 1})
    conn.execute(
        "INSERT INTO currents (name, task, version_id, reason, evidence, created_at)"
        " SELECT v.name, 'nominal', v.id, 'migrated', ?, ? FROM versions v"
        " WHERE v.number = (SELECT MAX(number) FROM versions w WHERE w.name = v.name) ORDER BY v.name",
        (evidence, now),
    )


def _add_audit_log(conn: sqlite3.Connection) -> None:
    """Schema 2 -> 3: the audit log table (empty: what happened before it was not recorded)."""
    conn.execute(_schema_statement("CREATE TABLE IF NOT EXISTS audit_log ("))


def migrate_index(index: SqliteIndex, *, from_version: int) -> None:
    """Bring a SQLite index from ``from_version`` to the current schema, in one transaction.
    (Schemas 1 and 2 only ever existed as SQLite files.)"""
    from kinetome.library.store.index import utc_now
    from kinetome.library.store.schema import SCHEMA, SCHEMA_VERSION

    conn, path = index.conn, index.path
    if from_version not in (1, 2):
        raise StoreIntegrityError(f"{path} has index schema {from_version}, which no kinetome wrote; restore it from a backup")
    if from_version == 2:
        with index.write_transaction():
            if index.schema_version() == from_version:  # else another process migrated it first
                _add_audit_log(conn)
                conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        return
    _backup(conn, path)
    conn.execute("PRAGMA foreign_keys = OFF")  # the versions table is rebuilt under the rows that point at it
    try:
        with index.write_transaction():
            if index.schema_version() != from_version:
                return  # another process migrated it first
            identities = _migrate_versions(conn)
            for statement in SCHEMA:
                conn.execute(statement)
            _migrate_models(conn, identities)
            _set_currents(conn, utc_now())
            conn.execute("INSERT OR IGNORE INTO store_info (key, value) VALUES ('store_id', ?)", (uuid.uuid4().hex,))
            broken = conn.execute("PRAGMA foreign_key_check").fetchall()
            if broken:
                raise StoreIntegrityError(f"{path}: migration left {len(broken)} dangling references; the index is unchanged")
            conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
    finally:
        conn.execute("PRAGMA foreign_keys = ON")

"""SQL queries on the index: insert and load versions, models and notes (no blob I/O here)."""

from __future__ import annotations

import hashlib
import sqlite3
from collections.abc import Iterable, Mapping
from datetime import datetime, timezone

from kinetome.library.store.metadata import canonical_json
from kinetome.library.store.records import FileEntry, ModelRecord, Note, VersionRecord

__all__ = [
    "utc_now",
    "content_key",
    "version_id",
    "numbers_of",
    "all_names",
    "find_by_content",
    "insert_blobs",
    "insert_version",
    "load_versions",
    "insert_model",
    "find_model_by_content",
    "load_models",
    "insert_note",
    "load_notes",
]

_VERSION_SELECT = """
    SELECT v.id, v.name, v.number, v.reason, v.meta, v.created_at,
           p.name AS parent_name, p.number AS parent_number
    FROM versions v LEFT JOIN versions p ON p.id = v.parent_id
"""


def utc_now() -> str:
    """UTC time as ISO 8601 with microseconds, e.g. ``2026-01-31T12:00:00.000000Z``."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def content_key(digests: Mapping[str, str]) -> str:
    """sha256 of the canonical role -> digest map: equal keys mean identical files."""
    return hashlib.sha256(canonical_json(sorted(digests.items())).encode()).hexdigest()


def version_id(conn: sqlite3.Connection, name: str, number: int) -> int | None:
    row = conn.execute("SELECT id FROM versions WHERE name = ? AND number = ?", (name, number)).fetchone()
    return None if row is None else int(row[0])


def numbers_of(conn: sqlite3.Connection, name: str) -> list[int]:
    return [int(r[0]) for r in conn.execute("SELECT number FROM versions WHERE name = ? ORDER BY number", (name,))]


def all_names(conn: sqlite3.Connection) -> list[str]:
    return [r[0] for r in conn.execute("SELECT DISTINCT name FROM versions ORDER BY name")]


def find_by_content(conn: sqlite3.Connection, name: str, key: str) -> int | None:
    row = conn.execute("SELECT id FROM versions WHERE name = ? AND content_key = ?", (name, key)).fetchone()
    return None if row is None else int(row[0])


def insert_blobs(conn: sqlite3.Connection, entries: Iterable[FileEntry]) -> None:
    conn.executemany(
        "INSERT OR IGNORE INTO blobs (digest, size) VALUES (?, ?)", [(e.digest, e.size) for e in entries]
    )


def insert_version(
    conn: sqlite3.Connection,
    *,
    name: str,
    files: tuple[FileEntry, ...],
    parent_id: int | None,
    reason: str,
    meta_json: str,
    created_at: str,
) -> int:
    """Insert ``name@(latest+1)``; call inside a write transaction. Returns the row id."""
    (latest,) = conn.execute("SELECT COALESCE(MAX(number), 0) FROM versions WHERE name = ?", (name,)).fetchone()
    insert_blobs(conn, files)
    cur = conn.execute(
        "INSERT INTO versions (name, number, parent_id, reason, meta, content_key, created_at)"
        " VALUES (?, ?, ?, ?, ?, ?, ?)",
        (name, int(latest) + 1, parent_id, reason, meta_json, content_key({e.role: e.digest for e in files}), created_at),
    )
    vid = int(cur.lastrowid)
    conn.executemany(
        "INSERT INTO version_files (version_id, role, digest, size) VALUES (?, ?, ?, ?)",
        [(vid, e.role, e.digest, e.size) for e in files],
    )
    return vid


def _files_by_owner(conn: sqlite3.Connection, table: str, owner_col: str, ids: list[int]) -> dict[int, list[FileEntry]]:
    out: dict[int, list[FileEntry]] = {i: [] for i in ids}
    for start in range(0, len(ids), 500):
        chunk = ids[start : start + 500]
        marks = ",".join("?" * len(chunk))
        rows = conn.execute(
            f"SELECT {owner_col}, role, digest, size FROM {table} WHERE {owner_col} IN ({marks}) ORDER BY role", chunk
        )
        for owner, role, digest, size in rows:
            out[int(owner)].append(FileEntry(role, digest, int(size)))
    return out


def load_versions(
    conn: sqlite3.Connection, where: str, params: tuple = (), order: str = "v.name, v.number"
) -> list[tuple[int, VersionRecord]]:
    """(row id, record) of the versions matching ``where`` (an SQL condition on alias ``v``)."""
    rows = conn.execute(f"{_VERSION_SELECT} WHERE {where} ORDER BY {order}", params).fetchall()
    files = _files_by_owner(conn, "version_files", "version_id", [int(r["id"]) for r in rows])
    out = []
    for r in rows:
        parent = None if r["parent_name"] is None else f"{r['parent_name']}@{r['parent_number']}"
        record = VersionRecord(
            name=r["name"],
            number=int(r["number"]),
            files=tuple(files[int(r["id"])]),
            parent=parent,
            reason=r["reason"],
            meta_json=r["meta"],
            created_at=r["created_at"],
        )
        out.append((int(r["id"]), record))
    return out


def insert_model(
    conn: sqlite3.Connection,
    *,
    version_row: int,
    kind: str,
    files: tuple[FileEntry, ...],
    meta_json: str,
    created_at: str,
) -> int:
    """Insert the next revision of ``kind`` on a version; call inside a write transaction."""
    (latest,) = conn.execute(
        "SELECT COALESCE(MAX(revision), 0) FROM models WHERE version_id = ? AND kind = ?", (version_row, kind)
    ).fetchone()
    insert_blobs(conn, files)
    cur = conn.execute(
        "INSERT INTO models (version_id, kind, revision, meta, content_key, created_at) VALUES (?, ?, ?, ?, ?, ?)",
        (version_row, kind, int(latest) + 1, meta_json, content_key({e.role: e.digest for e in files}), created_at),
    )
    mid = int(cur.lastrowid)
    conn.executemany(
        "INSERT INTO model_files (model_id, role, digest, size) VALUES (?, ?, ?, ?)",
        [(mid, e.role, e.digest, e.size) for e in files],
    )
    return mid


def find_model_by_content(conn: sqlite3.Connection, version_row: int, kind: str, key: str, *, latest_only: bool) -> int | None:
    """Row id of a revision of ``kind`` with identical files (only the latest one if ``latest_only``)."""
    if latest_only:
        row = conn.execute(
            "SELECT id, content_key FROM models WHERE version_id = ? AND kind = ? ORDER BY revision DESC LIMIT 1",
            (version_row, kind),
        ).fetchone()
        return int(row[0]) if row is not None and row[1] == key else None
    row = conn.execute(
        "SELECT id FROM models WHERE version_id = ? AND kind = ? AND content_key = ? ORDER BY revision DESC LIMIT 1",
        (version_row, kind, key),
    ).fetchone()
    return None if row is None else int(row[0])


def load_models(conn: sqlite3.Connection, where: str, params: tuple = ()) -> list[ModelRecord]:
    """Model revisions matching ``where`` (SQL on alias ``m``; version alias ``v``)."""
    rows = conn.execute(
        "SELECT m.id, m.kind, m.revision, m.meta, m.created_at, v.name, v.number"
        f" FROM models m JOIN versions v ON v.id = m.version_id WHERE {where}"
        " ORDER BY v.name, v.number, m.kind, m.revision",
        params,
    ).fetchall()
    files = _files_by_owner(conn, "model_files", "model_id", [int(r["id"]) for r in rows])
    return [
        ModelRecord(
            version=f"{r['name']}@{r['number']}",
            kind=r["kind"],
            revision=int(r["revision"]),
            files=tuple(files[int(r["id"])]),
            meta_json=r["meta"],
            created_at=r["created_at"],
        )
        for r in rows
    ]


def insert_note(conn: sqlite3.Connection, version_row: int, text: str, created_at: str) -> None:
    conn.execute("INSERT INTO notes (version_id, text, created_at) VALUES (?, ?, ?)", (version_row, text, created_at))


def load_notes(conn: sqlite3.Connection, version_row: int, ref: str) -> list[Note]:
    rows = conn.execute("SELECT text, created_at FROM notes WHERE version_id = ? ORDER BY id", (version_row,))
    return [Note(ref, i, text, created_at) for i, (text, created_at) in enumerate(rows, start=1)]

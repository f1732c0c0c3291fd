"""SQL on the index: versions, current versions, artifacts, notes (no blob I/O here).

Written once for both index backends (``?`` placeholders, SQL that SQLite and PostgreSQL
read alike); ``conn`` is an ``IndexBackend``. The audit log has its own module, ``audit.py``."""

from __future__ import annotations

import json
from collections.abc import Iterable
from datetime import datetime, timezone

from kinetome.library.store.identity import content_key
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.records import ArtifactRecord, CurrentEntry, FileEntry, Note, VersionRecord

__all__ = [
    "utc_now",
    "content_key",
    "store_info",
    "store_infos",
    "set_store_info",
    "version_id",
    "numbers_of",
    "all_names",
    "find_by_content",
    "find_by_identity",
    "find_by_identity_prefix",
    "latest_row",
    "parent_row",
    "insert_blobs",
    "insert_version",
    "load_versions",
    "skill_summaries",
    "insert_current",
    "current_row",
    "load_currents",
    "load_current_history",
    "current_tasks",
    "insert_artifact",
    "find_artifact_by_content",
    "find_artifacts_by_key",
    "load_artifacts",
    "insert_note",
    "load_notes",
]

_VERSION_SELECT = """
    SELECT v.id, v.name, v.number, v.reason, v.meta, v.created_at, v.identity, v.parent_identity, v.origin,
           p.name AS parent_name, p.number AS parent_number
    FROM versions v LEFT JOIN versions p ON p.id = v.parent_id
"""


def utc_now() -> str:
    """UTC time as ISO 8601 with microseconds, e.g. ``2026-01-31T12:00:00.000000Z``."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def store_info(conn: IndexBackend, key: str) -> str | None:
    return store_infos(conn, key).get(key)


def store_infos(conn: IndexBackend, *keys: str) -> dict[str, str]:
    """The ``store_info`` values of those ``keys`` that are set, in one query."""
    marks = ",".join("?" * len(keys))
    return {str(k): str(v) for k, v in conn.execute(f"SELECT key, value FROM store_info WHERE key IN ({marks})", keys)}


def set_store_info(conn: IndexBackend, key: str, value: str) -> None:
    conn.execute(
        "INSERT INTO store_info (key, value) VALUES (?, ?) ON CONFLICT (key) DO UPDATE SET value = excluded.value", (key, value)
    )


# -- versions --------------------------------------------------------------------------


def version_id(conn: IndexBackend, name: str, number: int) -> int | None:
    row = conn.execute("SELECT id FROM versions WHERE name = ? AND number = ?", (name, number)).fetchone()
    return None if row is None else int(row[0])


def numbers_of(conn: IndexBackend, name: str) -> list[int]:
    return [int(r[0]) for r in conn.execute("SELECT number FROM versions WHERE name = ? ORDER BY number", (name,))]


def all_names(conn: IndexBackend) -> list[str]:
    return [r[0] for r in conn.execute("SELECT DISTINCT name FROM versions ORDER BY name")]


def find_by_content(conn: IndexBackend, name: str, key: str) -> int | None:
    row = conn.execute(
        "SELECT id FROM versions WHERE name = ? AND content_key = ? ORDER BY number LIMIT 1", (name, key)
    ).fetchone()
    return None if row is None else int(row[0])


def find_by_identity(conn: IndexBackend, identity: str) -> int | None:
    row = conn.execute("SELECT id FROM versions WHERE identity = ?", (identity,)).fetchone()
    return None if row is None else int(row[0])


def find_by_identity_prefix(conn: IndexBackend, name: str, prefix: str) -> list[int]:
    rows = conn.execute(
        "SELECT id FROM versions WHERE name = ? AND identity LIKE ? ORDER BY number", (name, prefix + "%")
    )
    return [int(r[0]) for r in rows]


def latest_row(conn: IndexBackend, name: str) -> int | None:
    row = conn.execute("SELECT id FROM versions WHERE name = ? ORDER BY number DESC LIMIT 1", (name,)).fetchone()
    return None if row is None else int(row[0])


def parent_row(conn: IndexBackend, row_id: int) -> int | None:
    row = conn.execute("SELECT parent_id FROM versions WHERE id = ?", (row_id,)).fetchone()
    return None if row is None or row[0] is None else int(row[0])


def insert_blobs(conn: IndexBackend, entries: Iterable[FileEntry]) -> None:
    conn.executemany(
        "INSERT INTO blobs (digest, size) VALUES (?, ?) ON CONFLICT DO NOTHING", [(e.digest, e.size) for e in entries]
    )


def insert_version(
    conn: IndexBackend,
    *,
    name: str,
    files: tuple[FileEntry, ...],
    parent_id: int | None,
    parent_identity: str | None,
    reason: str,
    identity: str,
    meta_json: str,
    created_at: str,
    number: int | None = None,
    origin_json: str | None = None,
) -> int:
    """Insert ``name@number`` (default: the highest number + 1); call inside a write transaction."""
    if number is None:
        (latest,) = conn.execute("SELECT COALESCE(MAX(number), 0) FROM versions WHERE name = ?", (name,)).fetchone()
        number = int(latest) + 1
    insert_blobs(conn, files)
    vid = conn.insert(
        "INSERT INTO versions (name, number, parent_id, parent_identity, reason, identity, origin, meta, content_key, created_at)"
        " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (
            name,
            number,
            parent_id,
            parent_identity,
            reason,
            identity,
            origin_json,
            meta_json,
            content_key({e.role: e.digest for e in files}),
            created_at,
        ),
    )
    conn.executemany(
        "INSERT INTO version_files (version_id, role, digest, size) VALUES (?, ?, ?, ?)",
        [(vid, e.role, e.digest, e.size) for e in files],
    )
    return vid


def _files_by_owner(conn: IndexBackend, table: str, owner_col: str, ids: list[int]) -> dict[int, list[FileEntry]]:
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
    conn: IndexBackend, where: str, params: tuple = (), order: str = "v.name, v.number"
) -> list[tuple[int, VersionRecord]]:
    """(row id, record) of the versions matching ``where`` (an SQL condition on alias ``v``)."""
    rows = conn.execute(f"{_VERSION_SELECT} WHERE {where} ORDER BY {order}", params).fetchall()
    files = _files_by_owner(conn, "version_files", "version_id", [int(r[0]) for r in rows])
    out = []
    for vid, name, number, reason, meta, created_at, identity, parent_identity, origin, parent_name, parent_number in rows:
        record = VersionRecord(
            name=name,
            number=int(number),
            files=tuple(files[int(vid)]),
            parent=None if parent_name is None else f"{parent_name}@{parent_number}",
            reason=reason,
            meta_json=meta,
            created_at=created_at,
            identity=identity,
            parent_identity=parent_identity,
            origin_json=origin,
        )
        out.append((int(vid), record))
    return out


def skill_summaries(conn: IndexBackend) -> list[tuple]:
    """(name, newest number, count, newest created_at, description, env, nominal current number) per skill.

    description/env come from the newest version whose meta holds them as text.
    """
    description, env = conn.json_text("d.meta", "description"), conn.json_text("e.meta", "env")
    return conn.execute(
        "SELECT v.name, v.number, c.n, v.created_at,"
        f" (SELECT {description} FROM versions d WHERE d.name = v.name"
        f"   AND {description} IS NOT NULL ORDER BY d.number DESC LIMIT 1),"
        f" (SELECT {env} FROM versions e WHERE e.name = v.name"
        f"   AND {env} IS NOT NULL ORDER BY e.number DESC LIMIT 1),"
        " (SELECT cv.number FROM currents k JOIN versions cv ON cv.id = k.version_id"
        "   WHERE k.name = v.name AND k.task = 'nominal' ORDER BY k.id DESC LIMIT 1)"
        " FROM versions v"
        " JOIN (SELECT name, MAX(number) AS top, COUNT(*) AS n FROM versions GROUP BY name) c"
        " ON c.name = v.name AND c.top = v.number ORDER BY v.name"
    ).fetchall()


# -- current versions ------------------------------------------------------------------

_CURRENT_SELECT = (
    "SELECT k.name, k.task, v.name || '@' || v.number AS ref, k.reason, k.evidence, k.created_at"
    " FROM currents k JOIN versions v ON v.id = k.version_id"
)


def _current(row: tuple) -> CurrentEntry:
    return CurrentEntry(row[0], row[1], row[2], row[3], row[4], row[5])


def insert_current(
    conn: IndexBackend, *, name: str, task: str, version_row: int, reason: str, evidence_json: str, created_at: str
) -> None:
    conn.execute(
        "INSERT INTO currents (name, task, version_id, reason, evidence, created_at) VALUES (?, ?, ?, ?, ?, ?)",
        (name, task, version_row, reason, evidence_json, created_at),
    )


def current_row(conn: IndexBackend, name: str, task: str) -> int | None:
    """Row id of the current version of ``name`` for ``task`` (None: never set)."""
    row = conn.execute(
        "SELECT version_id FROM currents WHERE name = ? AND task = ? ORDER BY id DESC LIMIT 1", (name, task)
    ).fetchone()
    return None if row is None else int(row[0])


def load_currents(conn: IndexBackend, name: str) -> list[CurrentEntry]:
    """The latest entry per task, sorted by task."""
    rows = conn.execute(
        f"{_CURRENT_SELECT} WHERE k.id IN (SELECT MAX(id) FROM currents WHERE name = ? GROUP BY task) ORDER BY k.task",
        (name,),
    )
    return [_current(r) for r in rows]


def load_current_history(conn: IndexBackend, name: str) -> list[CurrentEntry]:
    return [_current(r) for r in conn.execute(f"{_CURRENT_SELECT} WHERE k.name = ? ORDER BY k.id", (name,))]


def current_tasks(conn: IndexBackend, version_row: int) -> list[str]:
    """Tasks for which the version is current now, sorted."""
    rows = conn.execute(
        "SELECT task FROM currents WHERE id IN (SELECT MAX(id) FROM currents"
        "  WHERE name = (SELECT name FROM versions WHERE id = ?) GROUP BY task) AND version_id = ? ORDER BY task",
        (version_row, version_row),
    )
    return [r[0] for r in rows]


# -- artifacts -------------------------------------------------------------------------


def insert_artifact(
    conn: IndexBackend,
    *,
    version_row: int,
    kind: str,
    files: tuple[FileEntry, ...],
    computed_on_json: str,
    task_json: str,
    settings_json: str,
    software_json: str,
    meta_json: str,
    lookup: str,
    digest: str,
    created_at: str,
    origin_json: str | None = None,
    revision: int | None = None,
) -> int:
    """Insert the next revision of ``kind`` on a version (or ``revision``); call inside a write transaction."""
    if revision is None:
        (latest,) = conn.execute(
            "SELECT COALESCE(MAX(revision), 0) FROM artifacts WHERE version_id = ? AND kind = ?", (version_row, kind)
        ).fetchone()
        revision = int(latest) + 1
    insert_blobs(conn, files)
    aid = conn.insert(
        "INSERT INTO artifacts (version_id, kind, revision, computed_on, task, settings, software, meta,"
        " lookup_key, digest, content_key, origin, created_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        (
            version_row, kind, revision, computed_on_json, task_json, settings_json, software_json, meta_json,
            lookup, digest, content_key({e.role: e.digest for e in files}), origin_json, created_at,
        ),
    )
    conn.executemany(
        "INSERT INTO artifact_files (artifact_id, role, digest, size) VALUES (?, ?, ?, ?)",
        [(aid, e.role, e.digest, e.size) for e in files],
    )
    return aid


def find_artifact_by_content(
    conn: IndexBackend, version_row: int, kind: str, *, files_key: str, lookup: str, digest: str | None = None
) -> int | None:
    """The latest revision of ``kind`` if it has the same files and lookup key (or, given ``digest``,
    any revision with that digest)."""
    if digest is not None:
        row = conn.execute(
            "SELECT id FROM artifacts WHERE version_id = ? AND kind = ? AND digest = ? ORDER BY revision DESC LIMIT 1",
            (version_row, kind, digest),
        ).fetchone()
        return None if row is None else int(row[0])
    row = conn.execute(
        "SELECT id, content_key, lookup_key FROM artifacts WHERE version_id = ? AND kind = ? ORDER BY revision DESC LIMIT 1",
        (version_row, kind),
    ).fetchone()
    return int(row[0]) if row is not None and (row[1], row[2]) == (files_key, lookup) else None


def find_artifacts_by_key(conn: IndexBackend, kind: str, lookup: str) -> list[int]:
    """Artifact row ids of ``kind`` with this lookup key, newest first."""
    rows = conn.execute(
        "SELECT id FROM artifacts WHERE kind = ? AND lookup_key = ? ORDER BY id DESC", (kind, lookup)
    )
    return [int(r[0]) for r in rows]


def load_artifacts(conn: IndexBackend, where: str, params: tuple = ()) -> list[ArtifactRecord]:
    """Artifact revisions matching ``where`` (SQL on alias ``a``; version alias ``v``)."""
    rows = conn.execute(
        "SELECT a.id, a.kind, a.revision, a.meta, a.created_at, a.computed_on, a.task, a.settings, a.software,"
        " a.digest, a.origin, v.name, v.number"
        f" FROM artifacts a JOIN versions v ON v.id = a.version_id WHERE {where}"
        " ORDER BY v.name, v.number, a.kind, a.revision",
        params,
    ).fetchall()
    files = _files_by_owner(conn, "artifact_files", "artifact_id", [int(r[0]) for r in rows])
    return [
        ArtifactRecord(
            version=f"{name}@{number}",
            kind=kind,
            revision=int(revision),
            files=tuple(files[int(aid)]),
            meta_json=meta,
            created_at=created_at,
            computed_on=tuple(json.loads(computed_on)),
            task_json=task,
            settings_json=settings,
            software_json=software,
            digest=digest,
            origin_json=origin,
        )
        for aid, kind, revision, meta, created_at, computed_on, task, settings, software, digest, origin, name, number in rows
    ]


# -- notes -----------------------------------------------------------------------------


def insert_note(conn: IndexBackend, version_row: int, text: str, created_at: str) -> None:
    conn.execute("INSERT INTO notes (version_id, text, created_at) VALUES (?, ?, ?)", (version_row, text, created_at))


def load_notes(conn: IndexBackend, version_row: int, ref: str) -> list[Note]:
    rows = conn.execute("SELECT text, created_at FROM notes WHERE version_id = ? ORDER BY id", (version_row,))
    return [Note(ref, i, text, created_at) for i, (text, created_at) in enumerate(rows, start=1)]

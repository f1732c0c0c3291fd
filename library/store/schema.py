"""The SQLite index: schema, connection settings (WAL, busy timeout) and write transactions."""

from __future__ import annotations

import sqlite3
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from kinetome.library.errors import StoreIntegrityError

__all__ = ["SCHEMA_VERSION", "SCHEMA", "connect", "write_transaction"]

SCHEMA_VERSION = 2
BUSY_TIMEOUT_S = 60.0

# Stored in PRAGMA user_version (schema 1: the first wave's stores, migrated on open by
# ``migrate.py``). Versions, artifacts, notes and current-version events are only ever inserted.
SCHEMA: tuple[str, ...] = (
    """CREATE TABLE IF NOT EXISTS store_info (
        key   TEXT PRIMARY KEY,
        value TEXT NOT NULL
    )""",
    """CREATE TABLE IF NOT EXISTS blobs (
        digest TEXT PRIMARY KEY CHECK (length(digest) = 64),
        size   INTEGER NOT NULL CHECK (size >= 0)
    )""",
    """CREATE TABLE IF NOT EXISTS versions (
        id              INTEGER PRIMARY KEY,
        name            TEXT    NOT NULL,
        number          INTEGER NOT NULL CHECK (number >= 1),
        parent_id       INTEGER REFERENCES versions(id),
        parent_identity TEXT    CHECK (parent_identity IS NULL OR length(parent_identity) = 64),
        reason          TEXT    NOT NULL CHECK (reason IN ('registered', 'revised', 'retrained', 'initiation-learned')),
        identity        TEXT    NOT NULL UNIQUE CHECK (length(identity) = 64),
        origin          TEXT,
        meta            TEXT    NOT NULL,
        content_key     TEXT    NOT NULL,
        created_at      TEXT    NOT NULL,
        UNIQUE (name, number)
    )""",
    "CREATE INDEX IF NOT EXISTS versions_parent ON versions(parent_id)",
    "CREATE INDEX IF NOT EXISTS versions_content ON versions(name, content_key)",
    """CREATE TABLE IF NOT EXISTS version_files (
        version_id INTEGER NOT NULL REFERENCES versions(id),
        role       TEXT    NOT NULL,
        digest     TEXT    NOT NULL REFERENCES blobs(digest),
        size       INTEGER NOT NULL,
        PRIMARY KEY (version_id, role)
    )""",
    "CREATE INDEX IF NOT EXISTS version_files_digest ON version_files(digest)",
    """CREATE TABLE IF NOT EXISTS notes (
        id         INTEGER PRIMARY KEY,
        version_id INTEGER NOT NULL REFERENCES versions(id),
        text       TEXT    NOT NULL,
        created_at TEXT    NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS notes_version ON notes(version_id)",
    """CREATE TABLE IF NOT EXISTS currents (
        id         INTEGER PRIMARY KEY,
        name       TEXT    NOT NULL,
        task       TEXT    NOT NULL,
        version_id INTEGER NOT NULL REFERENCES versions(id),
        reason     TEXT    NOT NULL,
        evidence   TEXT    NOT NULL,
        created_at TEXT    NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS currents_name_task ON currents(name, task, id)",
    """CREATE TABLE IF NOT EXISTS artifacts (
        id          INTEGER PRIMARY KEY,
        version_id  INTEGER NOT NULL REFERENCES versions(id),
        kind        TEXT    NOT NULL,
        revision    INTEGER NOT NULL CHECK (revision >= 1),
        computed_on TEXT    NOT NULL,
        task        TEXT    NOT NULL,
        settings    TEXT    NOT NULL,
        software    TEXT    NOT NULL,
        meta        TEXT    NOT NULL,
        lookup_key  TEXT    NOT NULL,
        digest      TEXT    NOT NULL CHECK (length(digest) = 64),
        content_key TEXT    NOT NULL,
        origin      TEXT,
        created_at  TEXT    NOT NULL,
        UNIQUE (version_id, kind, revision)
    )""",
    "CREATE INDEX IF NOT EXISTS artifacts_lookup ON artifacts(kind, lookup_key)",
    """CREATE TABLE IF NOT EXISTS artifact_files (
        artifact_id INTEGER NOT NULL REFERENCES artifacts(id),
        role        TEXT    NOT NULL,
        digest      TEXT    NOT NULL REFERENCES blobs(digest),
        size        INTEGER NOT NULL,
        PRIMARY KEY (artifact_id, role)
    )""",
    "CREATE INDEX IF NOT EXISTS artifact_files_digest ON artifact_files(digest)",
)


@contextmanager
def write_transaction(conn: sqlite3.Connection) -> Iterator[sqlite3.Connection]:
    """One ``BEGIN IMMEDIATE`` transaction: the write lock is taken up front, so version
    numbers read inside it cannot be taken by another process before the commit."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield conn
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def _prepare(conn: sqlite3.Connection, path: Path, *, create: bool) -> None:
    conn.execute("PRAGMA foreign_keys = ON")
    conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
    if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
        conn.execute("PRAGMA journal_mode = WAL")
    conn.execute("PRAGMA synchronous = FULL")
    version = conn.execute("PRAGMA user_version").fetchone()[0]
    if version == 0:
        if not create:
            raise StoreIntegrityError(f"{path} has no kinetome tables; point --store at a kinetome store folder")
        with write_transaction(conn):
            # several processes may create the store at once: only the first builds the schema
            if conn.execute("PRAGMA user_version").fetchone()[0] == 0:
                for statement in SCHEMA:
                    conn.execute(statement)
                conn.execute("INSERT INTO store_info (key, value) VALUES ('store_id', ?)", (uuid.uuid4().hex,))
                conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
    elif version < SCHEMA_VERSION:
        from kinetome.library.store.migrate import migrate_index

        migrate_index(conn, path, from_version=version)
    elif version > SCHEMA_VERSION:
        raise StoreIntegrityError(
            f"{path} has index schema {version}, newer than this kinetome understands ({SCHEMA_VERSION}); "
            "upgrade kinetome"
        )


def connect(path: Path, *, create: bool) -> sqlite3.Connection:
    """Open the index (autocommit mode; transactions are explicit) and make sure the schema exists."""
    try:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
    except sqlite3.Error as e:
        raise StoreIntegrityError(f"{path} cannot be opened as a SQLite index ({e}); check the path and its permissions") from e
    conn.row_factory = sqlite3.Row
    try:
        _prepare(conn, path, create=create)
    except sqlite3.DatabaseError as e:
        conn.close()
        raise StoreIntegrityError(f"{path} is not a readable SQLite index ({e}); restore it from a backup") from e
    except BaseException:
        conn.close()
        raise
    return conn

"""The embedded index backend: one SQLite file in WAL mode, ``BEGIN IMMEDIATE`` write transactions."""

from __future__ import annotations

import sqlite3
import uuid
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from kinetome.library.errors import StoreIntegrityError
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.schema import SCHEMA, SCHEMA_VERSION

__all__ = ["SqliteIndex", "BUSY_TIMEOUT_S"]

BUSY_TIMEOUT_S = 60.0


class SqliteIndex(IndexBackend):
    """``index.sqlite`` of a store folder (schema version in ``PRAGMA user_version``)."""

    dialect = "sqlite"

    def __init__(self, path: Path, *, create: bool):
        self.path = path
        self.location = str(path)
        try:
            conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, isolation_level=None)
        except sqlite3.Error as e:
            raise StoreIntegrityError(f"{path} cannot be opened as a SQLite index ({e}); check the path and its permissions") from e
        self.conn = conn
        try:
            self._prepare(create=create)
        except sqlite3.DatabaseError as e:
            conn.close()
            raise StoreIntegrityError(f"{path} is not a readable SQLite index ({e}); restore it from a backup") from e
        except BaseException:
            conn.close()
            raise

    def _prepare(self, *, create: bool) -> None:
        conn, path = self.conn, self.path
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        if conn.execute("PRAGMA journal_mode").fetchone()[0].lower() != "wal":
            conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
        version = conn.execute("PRAGMA user_version").fetchone()[0]
        if version == 0:
            if not create:
                raise StoreIntegrityError(f"{path} has no kinetome tables; point --store at a kinetome store folder")
            with self.write_transaction():
                # several processes may create the store at once: only the first builds the schema
                if conn.execute("PRAGMA user_version").fetchone()[0] == 0:
                    for statement in SCHEMA:
                        conn.execute(statement)
                    conn.execute("INSERT INTO store_info (key, value) VALUES ('store_id', ?)", (uuid.uuid4().hex,))
                    conn.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        elif version < SCHEMA_VERSION:
            from kinetome.library.store.migrate import migrate_index

            migrate_index(self, from_version=version)
        elif version > SCHEMA_VERSION:
            raise StoreIntegrityError(
                f"{path} has index schema {version}, newer than this kinetome understands ({SCHEMA_VERSION}); "
                "upgrade kinetome"
            )

    # -- the IndexBackend interface ----------------------------------------------------

    def execute(self, sql: str, params: Sequence[Any] = ()) -> sqlite3.Cursor:
        return self.conn.execute(sql, tuple(params))

    def executemany(self, sql: str, rows: Iterable[Sequence[Any]]) -> None:
        self.conn.executemany(sql, rows)

    def insert(self, sql: str, params: Sequence[Any]) -> int:
        return int(self.conn.execute(sql, tuple(params)).lastrowid)

    @contextmanager
    def _write_transaction(self) -> Iterator[SqliteIndex]:
        """``BEGIN IMMEDIATE``: the write lock is taken up front, so version numbers read
        inside the transaction cannot be taken by another process before the commit."""
        self.conn.execute("BEGIN IMMEDIATE")
        try:
            yield self
        except BaseException:
            self.conn.execute("ROLLBACK")
            raise
        self.conn.execute("COMMIT")

    def json_text(self, column: str, key: str) -> str:
        return f"(CASE WHEN json_type({column}, '$.{key}') = 'text' THEN json_extract({column}, '$.{key}') END)"

    def integrity_problems(self) -> list[str]:
        problems = [r[0] for r in self.conn.execute("PRAGMA integrity_check") if r[0] != "ok"]
        for table, rowid, parent, _ in self.conn.execute("PRAGMA foreign_key_check"):
            problems.append(f"table {table} row {rowid} points at a missing row of {parent}")
        return problems

    def close(self) -> None:
        self.conn.close()

    def schema_version(self) -> int:
        return int(self.conn.execute("PRAGMA user_version").fetchone()[0])

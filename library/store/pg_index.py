"""The server index backend: PostgreSQL through psycopg 3; the write lock is a row lock.

Connection details come from the URL and, as libpq reads them, from ``PGHOST``/``PGUSER``/...,
a service file (``?service=NAME``) and a password file (``~/.pgpass``). A store is one database
(or the first schema on the URL's ``search_path``). Imported only for ``postgresql://`` stores
that may be written (read-only ones use ``pg_reader``, unless it cannot read here).
"""

from __future__ import annotations

import uuid
from collections.abc import Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from typing import Any

import psycopg

from kinetome.library.store.pg_common import (
    CONNECTION_SETTINGS,
    PostgresDialect,
    cannot_connect,
    cannot_open,
    check_schema_version,
    read_schema_version,
    refused_statement,
    stopped_answering,
)
from kinetome.library.store.schema import SCHEMA_VERSION, schema_statements

__all__ = ["PostgresIndex"]


class PostgresIndex(PostgresDialect):
    """The index of a store in a PostgreSQL database (schema version in ``store_info``)."""

    def __init__(self, url: str, *, create: bool, info: Mapping[str, str] | None = None):
        self.location = url
        self._sql: dict[str, str] = {}
        try:
            self.conn = psycopg.connect(url, autocommit=True, **CONNECTION_SETTINGS)
        except psycopg.Error as e:
            raise cannot_connect(url, e) from None
        try:
            self._prepare(create=create, info=info or {})
        except psycopg.Error as e:
            self.conn.close()
            raise cannot_open(url, e) from None
        except BaseException:
            self.conn.close()
            raise

    def _schema_version(self) -> int | None:
        return read_schema_version(lambda sql: self.conn.execute(sql).fetchall())

    def _prepare(self, *, create: bool, info: Mapping[str, str]) -> None:
        if check_schema_version(self.location, self._schema_version(), create=create):
            with self.conn.transaction():
                # several processes may create the store at once: only the first builds the schema
                self.conn.execute("SELECT pg_advisory_xact_lock(hashtext('kinetome store ' || coalesce(current_schema(), '')))")
                if self._schema_version() is None:
                    self._create_schema(info)

    def _create_schema(self, info: Mapping[str, str]) -> None:
        for statement in schema_statements(self.dialect):
            self.conn.execute(statement)
        rows = {"store_id": uuid.uuid4().hex, "schema": str(SCHEMA_VERSION), **info}
        with self.conn.cursor() as cur:
            cur.executemany("INSERT INTO store_info (key, value) VALUES (%s, %s)", list(rows.items()))

    # -- the IndexBackend interface ----------------------------------------------------

    def _translate(self, sql: str) -> str:
        """``?`` placeholders -> psycopg's ``%s`` (a literal ``%`` doubled)."""
        out = self._sql.get(sql)
        if out is None:
            out = self._sql[sql] = sql.replace("%", "%%").replace("?", "%s")
        return out

    @contextmanager
    def _clean_errors(self) -> Iterator[None]:
        """A lost connection or a refused statement becomes one clean kinetome error."""
        try:
            yield
        except psycopg.OperationalError as e:
            raise stopped_answering(self.location, e) from None
        except psycopg.DatabaseError as e:
            raise refused_statement(self.location, e) from None

    def execute(self, sql: str, params: Sequence[Any] = ()) -> psycopg.Cursor:
        with self._clean_errors():
            return self.conn.execute(self._translate(sql), tuple(params))

    def executemany(self, sql: str, rows: Iterable[Sequence[Any]]) -> None:
        rows = [tuple(r) for r in rows]
        if rows:
            with self._clean_errors(), self.conn.cursor() as cur:
                cur.executemany(self._translate(sql), rows)

    def insert(self, sql: str, params: Sequence[Any]) -> int:
        return int(self.execute(sql + " RETURNING id", params).fetchone()[0])

    @contextmanager
    def _write_transaction(self) -> Iterator[PostgresIndex]:
        """A transaction that first locks the ``store_id`` row of ``store_info``: writers to one
        store take turns, so what they read after the lock (the highest number, the current
        version, the audit head) stays true until they commit. A dropped connection rolls back."""
        with self._clean_errors(), self.conn.transaction():
            self.conn.execute("SELECT value FROM store_info WHERE key = 'store_id' FOR UPDATE")
            yield self

    def close(self) -> None:
        self.conn.close()

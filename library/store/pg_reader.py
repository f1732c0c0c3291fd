"""The light PostgreSQL index connection for read commands: libpq through ``libpq.py``, no full driver.

``list`` and ``show`` open a store for reading only; on a PostgreSQL store that connection runs
the same SQL as ``PostgresIndex`` (autocommit, one transaction per statement) and reports the same
errors, but skips importing psycopg. ``open_reader`` returns None where it cannot read exactly as
the full driver would (no loadable libpq, a client encoding other than UTF-8); the caller then
uses ``PostgresIndex``.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from functools import lru_cache
from typing import Any, NoReturn

from kinetome.library.store import libpq
from kinetome.library.store.pg_common import (
    CONNECT_TIMEOUT_S,
    CONNECTION_SETTINGS,
    PostgresDialect,
    cannot_connect,
    cannot_open,
    check_schema_version,
    read_schema_version,
    refused_statement,
    stopped_answering,
)

__all__ = ["PostgresReader", "Rows", "open_reader"]


class Rows:
    """A finished query's rows, read like a cursor: ``fetchone``, ``fetchall``, iteration."""

    def __init__(self, rows: list[tuple]):
        self._rows = iter(rows)

    def fetchone(self) -> tuple | None:
        return next(self._rows, None)

    def fetchall(self) -> list[tuple]:
        return list(self._rows)

    def __iter__(self) -> Iterator[tuple]:
        return self._rows


@lru_cache(maxsize=1024)  # the index runs the same few statements over and over
def _numbered(sql: str) -> str:
    """``?`` placeholders -> libpq's ``$1``, ``$2`` ... (the index's SQL has no ``?`` elsewhere)."""
    parts = sql.split("?")
    return parts[0] + "".join(f"${i}{part}" for i, part in enumerate(parts[1:], start=1))


class PostgresReader(PostgresDialect):
    """A read-only connection to a store's index in a PostgreSQL database."""

    read_only = True

    def __init__(self, url: str, conn: libpq.Connection):
        self.location = url
        self._conn = conn

    @contextmanager
    def _clean_errors(self) -> Iterator[None]:
        """The same clean errors as the full driver's connection gives."""
        try:
            yield
        except libpq.LibpqError as e:
            clean = stopped_answering(self.location, e) if e.unavailable else refused_statement(self.location, e)
            raise clean from None

    def execute(self, sql: str, params: Sequence[Any] = ()) -> Rows:
        with self._clean_errors():
            return Rows(self._conn.query(_numbered(sql), tuple(params)))

    def executemany(self, sql: str, rows: Iterable[Sequence[Any]]) -> None:
        self.refuse_writes()

    def insert(self, sql: str, params: Sequence[Any]) -> int:
        self.refuse_writes()

    def _write_transaction(self) -> NoReturn:
        self.refuse_writes()

    def schema_version(self) -> int | None:
        return read_schema_version(self._conn.query)

    def close(self) -> None:
        self._conn.close()


def open_reader(url: str) -> PostgresReader | None:
    """A read-only connection to the store at ``url``, or None where the full driver must be used.

    Raises as ``PostgresIndex`` does: StoreUnavailableError (cannot connect), NotFoundError
    (no kinetome tables), StoreIntegrityError (unknown schema or a refused statement).
    """
    lib = libpq.load_libpq()
    if lib is None:
        return None
    try:
        conn = libpq.connect(lib, url, CONNECTION_SETTINGS, timeout_s=CONNECT_TIMEOUT_S)
    except libpq.LibpqError as e:
        raise cannot_connect(url, e) from None
    reader = PostgresReader(url, conn)
    try:
        if conn.parameter("client_encoding") != "UTF8":
            reader.close()  # the full driver decodes other encodings
            return None
        try:
            version = reader.schema_version()
        except libpq.LibpqError as e:
            raise cannot_open(url, e) from None
        check_schema_version(url, version, create=False)
    except BaseException:
        reader.close()
        raise
    return reader

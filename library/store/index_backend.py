"""The small interface every index backend provides (SQLite embedded, PostgreSQL server).

``index.py`` writes its SQL once, with ``?`` placeholders, against this interface; a backend
runs it, takes the store's write lock in ``write_transaction`` and reports its own damage.
A connection marked ``read_only`` refuses to start a write transaction.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Iterable, Iterator, Sequence
from contextlib import AbstractContextManager
from typing import Any, NoReturn

from kinetome.library.errors import InvalidInputError

__all__ = ["IndexBackend"]


class IndexBackend(ABC):
    """One open connection to a store's index."""

    #: ``"sqlite"`` or ``"postgresql"``
    dialect: str
    #: where the index is, for messages (never holds a password)
    location: str
    #: set once a store opened for reading only is open: every write transaction is refused
    read_only: bool = False

    @abstractmethod
    def execute(self, sql: str, params: Sequence[Any] = ()) -> Any:
        """Run one statement (``?`` placeholders); returns a cursor (``fetchone``, ``fetchall``, iteration)."""

    @abstractmethod
    def executemany(self, sql: str, rows: Iterable[Sequence[Any]]) -> None:
        """Run one statement for each parameter row."""

    @abstractmethod
    def insert(self, sql: str, params: Sequence[Any]) -> int:
        """Run an INSERT into a table with an ``id`` column and return the new row's id."""

    def write_transaction(self) -> AbstractContextManager[IndexBackend]:
        """One transaction holding the store's write lock from its first statement: version numbers,
        revisions and audit entries read inside it cannot be taken by another writer before the commit."""
        self.check_writable()
        return self._write_transaction()

    def check_writable(self) -> None:
        """Raise (``refuse_writes``) if this connection is marked ``read_only``."""
        if self.read_only:
            self.refuse_writes()

    def refuse_writes(self) -> NoReturn:
        """The error for a write through a connection opened for reading only."""
        raise InvalidInputError(
            f"the store at {self.location} was opened for reading only and cannot be changed; "
            "open it without read_only=True to write to it"
        )

    @abstractmethod
    def _write_transaction(self) -> AbstractContextManager[IndexBackend]:
        """The backend's write transaction (see ``write_transaction``)."""

    @abstractmethod
    def json_text(self, column: str, key: str) -> str:
        """An SQL expression: the text value of ``key`` in the JSON object in ``column``, else NULL."""

    @abstractmethod
    def integrity_problems(self) -> list[str]:
        """Damage the backend itself can see (page checks, dangling references), one line each."""

    @abstractmethod
    def close(self) -> None:
        """Close the connection (an open transaction is rolled back)."""

    def rows(self, sql: str, params: Sequence[Any] = ()) -> Iterator[tuple]:
        """The rows of a query, as tuples."""
        return iter(self.execute(sql, params).fetchall())

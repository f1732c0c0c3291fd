"""A small binding to libpq through ctypes: connect, run one parameterised query, read its rows.

Read commands (``list``, ``show``) on a PostgreSQL store use it instead of the full driver (psycopg),
whose import alone (its async half and asyncio included) costs more CPU than the rest of such a
command. It loads the libpq psycopg itself would use: the copy bundled with ``psycopg[binary]``,
or the system's for the ``c`` and ``python`` implementations (``$PSYCOPG_IMPL`` is honoured), so
URLs, ``PG*`` variables, service and password files behave exactly alike. Parameters always travel
apart from the SQL text (``PQsendQueryParams``); results arrive as text and are converted by
column type like the full driver does for the types the index uses.
"""

from __future__ import annotations

import ctypes
import glob
import importlib.util
import os
import select
import sys
import time
from collections.abc import Mapping, Sequence
from functools import cache
from pathlib import Path
from typing import Any

__all__ = ["LibpqError", "Connection", "load_libpq", "connect"]

# libpq's enums (libpq-fe.h)
_CONNECTION_OK, _CONNECTION_BAD = 0, 1
_POLLING_FAILED, _POLLING_READING, _POLLING_WRITING, _POLLING_OK = 0, 1, 2, 3
_COMMAND_OK, _TUPLES_OK = 1, 2
_DIAG_SQLSTATE, _DIAG_MESSAGE_PRIMARY = ord("C"), ord("M")

_INT8_MIN, _INT8_MAX = -(2**63), 2**63 - 1
# SQLSTATE classes the full driver reports as OperationalError: the server or the link, not the statement
_UNAVAILABLE_CLASSES = ("08", "53", "54", "55", "57", "58", "F0")


class LibpqError(Exception):
    """A refused connection or statement: libpq's message, its SQLSTATE (if any) and whether
    the server or the link failed (``unavailable``) rather than the statement."""

    def __init__(self, message: str, *, sqlstate: str | None = None, unavailable: bool = False):
        super().__init__(message)
        self.sqlstate = sqlstate
        self.unavailable = unavailable


# -- finding and loading libpq ------------------------------------------------------------


def _bundled_candidates() -> list[str]:
    """libpq inside the psycopg[binary] wheel: ``psycopg_binary.libs/`` (Linux, Windows) or ``.dylibs/`` (macOS)."""
    spec = importlib.util.find_spec("psycopg_binary")  # finds the package without importing it
    if spec is None or not spec.submodule_search_locations:
        return []
    package = Path(next(iter(spec.submodule_search_locations)))
    patterns = [package.parent / "psycopg_binary.libs" / "libpq*", package / ".dylibs" / "libpq*"]
    return sorted(p for pattern in patterns for p in glob.glob(str(pattern)))


def _system_candidates() -> list[str]:
    """The system's libpq by its usual file name, found by the dynamic loader's own search."""
    return {"darwin": ["libpq.5.dylib", "libpq.dylib"], "win32": ["libpq.dll"]}.get(sys.platform, ["libpq.so.5"])


def _candidates() -> list[str]:
    """Where psycopg would take its libpq from, in its own order of implementations."""
    impl = os.environ.get("PSYCOPG_IMPL", "").lower()
    if impl in ("c", "python"):
        return _system_candidates()
    if impl == "binary":
        return _bundled_candidates()
    if impl:
        return []  # an implementation we do not know: leave it to psycopg
    if importlib.util.find_spec("psycopg_c") is not None:
        return _system_candidates()
    if importlib.util.find_spec("psycopg_binary") is not None:
        return _bundled_candidates()
    return _system_candidates()


_SIGNATURES: dict[str, tuple[Any, list[Any]]] = {
    "PQconnectStartParams": (ctypes.c_void_p, [ctypes.POINTER(ctypes.c_char_p), ctypes.POINTER(ctypes.c_char_p), ctypes.c_int]),
    "PQconnectPoll": (ctypes.c_int, [ctypes.c_void_p]),
    "PQstatus": (ctypes.c_int, [ctypes.c_void_p]),
    "PQsocket": (ctypes.c_int, [ctypes.c_void_p]),
    "PQhost": (ctypes.c_char_p, [ctypes.c_void_p]),
    "PQport": (ctypes.c_char_p, [ctypes.c_void_p]),
    "PQerrorMessage": (ctypes.c_char_p, [ctypes.c_void_p]),
    "PQparameterStatus": (ctypes.c_char_p, [ctypes.c_void_p, ctypes.c_char_p]),
    "PQfinish": (None, [ctypes.c_void_p]),
    "PQsendQueryParams": (
        ctypes.c_int,
        [ctypes.c_void_p, ctypes.c_char_p, ctypes.c_int, ctypes.POINTER(ctypes.c_uint), ctypes.POINTER(ctypes.c_char_p),
         ctypes.POINTER(ctypes.c_int), ctypes.POINTER(ctypes.c_int), ctypes.c_int],
    ),
    "PQflush": (ctypes.c_int, [ctypes.c_void_p]),
    "PQconsumeInput": (ctypes.c_int, [ctypes.c_void_p]),
    "PQisBusy": (ctypes.c_int, [ctypes.c_void_p]),
    "PQgetResult": (ctypes.c_void_p, [ctypes.c_void_p]),
    "PQresultStatus": (ctypes.c_int, [ctypes.c_void_p]),
    "PQresultErrorMessage": (ctypes.c_char_p, [ctypes.c_void_p]),
    "PQresultErrorField": (ctypes.c_char_p, [ctypes.c_void_p, ctypes.c_int]),
    "PQntuples": (ctypes.c_int, [ctypes.c_void_p]),
    "PQnfields": (ctypes.c_int, [ctypes.c_void_p]),
    "PQfname": (ctypes.c_char_p, [ctypes.c_void_p, ctypes.c_int]),
    "PQftype": (ctypes.c_uint, [ctypes.c_void_p, ctypes.c_int]),
    "PQgetisnull": (ctypes.c_int, [ctypes.c_void_p, ctypes.c_int, ctypes.c_int]),
    "PQgetlength": (ctypes.c_int, [ctypes.c_void_p, ctypes.c_int, ctypes.c_int]),
    "PQgetvalue": (ctypes.c_void_p, [ctypes.c_void_p, ctypes.c_int, ctypes.c_int]),
    "PQclear": (None, [ctypes.c_void_p]),
}


@cache
def load_libpq() -> ctypes.CDLL | None:
    """The libpq psycopg would use, with the functions this module calls typed; None if it
    cannot be found or loaded here (callers then use the full driver)."""
    for candidate in _candidates():
        try:
            lib = ctypes.CDLL(candidate)
            for name, (restype, argtypes) in _SIGNATURES.items():
                function = getattr(lib, name)
                function.restype, function.argtypes = restype, argtypes
        except (OSError, AttributeError):
            continue
        return lib
    return None


# -- values ---------------------------------------------------------------------------------


def _text(raw: bytes) -> str:
    return raw.decode("utf-8")


# PostgreSQL type oid -> Python value from the text form (what the full driver returns for them)
_LOADERS = {
    16: lambda raw: raw == b"t",  # boolean
    20: int, 21: int, 23: int, 26: int,  # bigint, smallint, integer, oid
    700: float, 701: float,  # real, double precision
    25: _text, 1043: _text, 19: _text, 705: _text, 1042: _text,  # text, varchar, name, unknown, char(n)
}


def _param(value: object) -> tuple[int, bytes | None]:
    """(type oid, text form) of one query parameter, typed as the full driver types it."""
    if value is None:
        return 0, None
    if isinstance(value, bool):
        return 16, b"t" if value else b"f"
    if isinstance(value, int):
        return (20 if _INT8_MIN <= value <= _INT8_MAX else 1700), str(value).encode()
    if isinstance(value, float):
        return 701, repr(value).encode()
    if isinstance(value, str):
        if "\x00" in value:
            raise LibpqError("PostgreSQL text fields cannot contain NUL (0x00) bytes")
        return 0, value.encode("utf-8")  # type left to the server, as for an untyped literal
    raise TypeError(f"query parameters must be None, bool, int, float or str, got {type(value).__name__}")


# -- connections ------------------------------------------------------------------------------


def _message(raw: bytes | None, fallback: str) -> str:
    text = (raw or b"").decode("utf-8", "replace").strip()
    return text or fallback


class Connection:
    """One connection in autocommit mode: each statement is its own transaction."""

    def __init__(self, lib: ctypes.CDLL, pgconn: int):
        self._lib = lib
        self._conn: int | None = pgconn

    def _wait(self, want_write: bool, deadline: float | None) -> bool:
        """Wait for the socket; False when the deadline passed. Ctrl-C interrupts the wait."""
        sock = self._lib.PQsocket(self._conn)
        if sock < 0:
            raise LibpqError(_message(self._lib.PQerrorMessage(self._conn), "the connection has no socket"), unavailable=True)
        timeout = None if deadline is None else max(0.0, deadline - time.monotonic())
        ready = select.select([], [sock], [], timeout) if want_write else select.select([sock], [], [], timeout)
        return any(ready)

    def query(self, sql: str, params: Sequence[object] = ()) -> list[tuple]:
        """The rows of one statement with ``$1``, ``$2`` ... placeholders (empty for a command)."""
        lib, conn = self._lib, self._require_open()
        typed = [_param(p) for p in params]
        n = len(typed)
        oids = (ctypes.c_uint * n)(*(t for t, _ in typed))
        values = (ctypes.c_char_p * n)(*(v for _, v in typed))
        if not lib.PQsendQueryParams(conn, sql.encode("utf-8"), n, oids, values, None, None, 0):
            raise self._error(None)
        try:
            while lib.PQflush(conn) == 1:
                self._wait(True, None)
            while lib.PQisBusy(conn):
                self._wait(False, None)
                if not lib.PQconsumeInput(conn):
                    raise self._error(None)
        except BaseException:
            self.close()  # interrupted mid-statement (Ctrl-C, a lost link): no half-read reply left behind
            raise
        rows: list[tuple] = []
        failure: Exception | None = None
        while (result := lib.PQgetResult(conn)) is not None:  # read every result, so the connection is idle again
            try:
                status = lib.PQresultStatus(result)
                if status == _TUPLES_OK and failure is None:
                    rows = self._rows(result)
                elif status not in (_TUPLES_OK, _COMMAND_OK) and failure is None:
                    failure = self._error(result)
            except (TypeError, UnicodeDecodeError, ValueError) as e:
                failure = failure or e
            finally:
                lib.PQclear(result)
        if failure is not None:
            raise failure
        return rows

    def _rows(self, result: int) -> list[tuple]:
        lib = self._lib
        loaders = []
        for col in range(lib.PQnfields(result)):
            oid = lib.PQftype(result, col)
            if oid not in _LOADERS:
                name = (lib.PQfname(result, col) or b"?").decode("utf-8", "replace")
                raise TypeError(f"column {name} has PostgreSQL type oid {oid}, which this reader does not convert")
            loaders.append(_LOADERS[oid])
        out = []
        for row in range(lib.PQntuples(result)):
            out.append(tuple(
                None if lib.PQgetisnull(result, row, col)
                else load(ctypes.string_at(lib.PQgetvalue(result, row, col), lib.PQgetlength(result, row, col)))
                for col, load in enumerate(loaders)
            ))
        return out

    def _error(self, result: int | None) -> LibpqError:
        lib, conn = self._lib, self._conn
        raw, sqlstate = lib.PQerrorMessage(conn), None
        if result is not None:  # the server's own words, without the (translated) severity prefix
            raw = lib.PQresultErrorField(result, _DIAG_MESSAGE_PRIMARY) or lib.PQresultErrorMessage(result)
            sqlstate = lib.PQresultErrorField(result, _DIAG_SQLSTATE)
        state = sqlstate.decode("ascii", "replace") if sqlstate else None
        lost = lib.PQstatus(conn) != _CONNECTION_OK
        unavailable = lost or state is None or state[:2] in _UNAVAILABLE_CLASSES
        return LibpqError(_message(raw, "the server closed the connection"), sqlstate=state, unavailable=unavailable)

    def parameter(self, name: str) -> str | None:
        """A setting the server reported at connection time (e.g. ``client_encoding``)."""
        raw = self._lib.PQparameterStatus(self._require_open(), name.encode("ascii"))
        return None if raw is None else raw.decode("utf-8", "replace")

    def _require_open(self) -> int:
        if self._conn is None:
            raise LibpqError("the connection is closed", unavailable=True)
        return self._conn

    def close(self) -> None:
        if self._conn is not None:
            self._lib.PQfinish(self._conn)
            self._conn = None


def connect(lib: ctypes.CDLL, conninfo: str, overrides: Mapping[str, str], *, timeout_s: float) -> Connection:
    """Connect to ``conninfo`` (a URL or ``key=value`` string; libpq adds the ``PG*`` variables, the
    service and password files); ``overrides`` win over it, as the full driver's keyword arguments do.
    Each host libpq tries gets ``timeout_s``; Ctrl-C interrupts the wait."""
    keys = [b"dbname", *(k.encode() for k in overrides)]
    vals = [conninfo.encode("utf-8"), *(v.encode("utf-8") for v in overrides.values())]
    keywords = (ctypes.c_char_p * (len(keys) + 1))(*keys, None)
    values = (ctypes.c_char_p * (len(vals) + 1))(*vals, None)
    pgconn = lib.PQconnectStartParams(keywords, values, 1)
    if not pgconn:
        raise LibpqError("connection failed: out of memory", unavailable=True)
    conn = Connection(lib, pgconn)
    try:
        _finish_connecting(conn, timeout_s)
    except BaseException:
        conn.close()
        raise
    return conn


def _finish_connecting(conn: Connection, timeout_s: float) -> None:
    """Drive libpq's connection state machine (as after ``PQconnectStart``: first wait to write)."""
    lib, pgconn = conn._lib, conn._conn
    host, deadline = None, 0.0
    state = _POLLING_WRITING if lib.PQstatus(pgconn) != _CONNECTION_BAD else _POLLING_FAILED
    while state != _POLLING_OK:
        if state == _POLLING_FAILED:
            raise LibpqError("connection failed: " + _message(lib.PQerrorMessage(pgconn), "unknown error"), unavailable=True)
        now_host = (lib.PQhost(pgconn), lib.PQport(pgconn))
        if now_host != host:  # libpq moved on to the next host of the URL: it gets its own time
            host, deadline = now_host, time.monotonic() + timeout_s
        if not conn._wait(state == _POLLING_WRITING, deadline):
            raise LibpqError("connection failed: connection timeout expired", unavailable=True)
        state = lib.PQconnectPoll(pgconn)

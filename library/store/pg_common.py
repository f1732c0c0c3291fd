"""What both PostgreSQL index connections share (the full driver's and the light reader's): the
connection settings they add, the schema check, messages and the SQL dialect. Imports no driver."""

from __future__ import annotations

from collections.abc import Callable, Sequence

from kinetome.library.errors import NotFoundError, StoreIntegrityError, StoreUnavailableError
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.schema import SCHEMA_VERSION

__all__ = [
    "CONNECT_TIMEOUT_S", "CONNECTION_SETTINGS", "read_schema_version", "check_schema_version",
    "cannot_connect", "cannot_open", "stopped_answering", "refused_statement", "PostgresDialect",
]

CONNECT_TIMEOUT_S = 20
# added to the store URL; they win over it and over the PG* variables
CONNECTION_SETTINGS = {"connect_timeout": str(CONNECT_TIMEOUT_S), "application_name": "kinetome"}
_SETTINGS_FIX = (
    "check that the server runs and the connection settings: the URL, PGHOST/PGPORT/PGUSER/PGDATABASE, "
    "the password file (~/.pgpass or $PGPASSFILE) or the service file ($PGSERVICEFILE)"
)
# an MVCC read of the catalog: a name lookup (to_regclass) would cache "no such table"
# for this session and miss the tables another process created meanwhile
_SCHEMA_EXISTS_SQL = (
    "SELECT EXISTS (SELECT 1 FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace"
    " WHERE c.relname = 'store_info' AND n.nspname = current_schema())"
)
_SCHEMA_VERSION_SQL = "SELECT value FROM store_info WHERE key = 'schema'"


def _first_line(error: BaseException) -> str:
    return (str(error).strip().splitlines() or [type(error).__name__])[0]


def cannot_connect(url: str, error: BaseException) -> StoreUnavailableError:
    return StoreUnavailableError(f"cannot connect to the store at {url}: {_first_line(error)}; {_SETTINGS_FIX}")


def cannot_open(url: str, error: BaseException) -> StoreIntegrityError:
    return StoreIntegrityError(f"the store at {url} cannot be opened: {_first_line(error)}; {_SETTINGS_FIX}")


def stopped_answering(location: str, error: BaseException) -> StoreUnavailableError:
    return StoreUnavailableError(f"the store at {location} stopped answering: {_first_line(error)}; {_SETTINGS_FIX}")


def refused_statement(location: str, error: BaseException) -> StoreIntegrityError:
    return StoreIntegrityError(
        f"the index at {location} refused a statement: {_first_line(error)}; run `kinetome verify`, "
        "and restore the database from a backup if it was changed outside kinetome"
    )


def read_schema_version(rows_of: Callable[[str], Sequence[tuple]]) -> int | None:
    """The store's index schema version, or None where the database has no kinetome tables;
    ``rows_of(sql)`` runs one statement on the connection and returns its rows."""
    ((exists,),) = rows_of(_SCHEMA_EXISTS_SQL)
    if not exists:
        return None
    rows = rows_of(_SCHEMA_VERSION_SQL)
    return None if not rows else int(rows[0][0])


def check_schema_version(location: str, version: int | None, *, create: bool) -> bool:
    """True when the store's tables must be created; raises for a missing store (``create`` off)
    or a schema this kinetome does not understand."""
    if version is None:
        if not create:
            raise NotFoundError(
                f"no kinetome store at {location} (the database has no kinetome tables); "
                "check --store / $KINETOME_STORE, or register a skill to create one"
            )
        return True
    if version != SCHEMA_VERSION:
        raise StoreIntegrityError(
            f"{location} has index schema {version}, which this kinetome does not understand ({SCHEMA_VERSION}); "
            "use the kinetome that wrote it"
        )
    return False


class PostgresDialect(IndexBackend):
    """The PostgreSQL side of ``IndexBackend`` that needs no connection."""

    dialect = "postgresql"

    def json_text(self, column: str, key: str) -> str:
        return f"(CASE WHEN jsonb_typeof(({column})::jsonb -> '{key}') = 'string' THEN ({column})::jsonb ->> '{key}' END)"

    def integrity_problems(self) -> list[str]:
        # the server enforces every foreign key and check; there is no page check to run from here
        return []

"""What both PostgreSQL index connections share (the full driver's and the light reader's): the
connection settings they add, the schema check, messages and the SQL dialect. Imports no driver."""

from __future__ import annotations

from kinetome.library.errors import NotFoundError, StoreIntegrityError
from kinetome.library.store.index_backend import IndexBackend
from kinetome.library.store.schema import SCHEMA_VERSION

__all__ = [
    "CONNECT_TIMEOUT_S", "CONNECTION_SETTINGS", "SETTINGS_FIX", "SCHEMA_EXISTS_SQL", "SCHEMA_VERSION_SQL",
    "first_line", "check_schema_version", "PostgresDialect",
]

CONNECT_TIMEOUT_S = 20
# added to the store URL; they win over it and over the PG* variables
CONNECTION_SETTINGS = {"connect_timeout": str(CONNECT_TIMEOUT_S), "application_name": "kinetome"}
SETTINGS_FIX = (
    "check that the server runs and the connection settings: the URL, PGHOST/PGPORT/PGUSER/PGDATABASE, "
    "the password file (~/.pgpass or $PGPASSFILE) or the service file ($PGSERVICEFILE)"
)
# an MVCC read of the catalog: a name lookup (to_regclass) would cache "no such table"
# for this session and miss the tables another process created meanwhile
SCHEMA_EXISTS_SQL = (
    "SELECT EXISTS (SELECT 1 FROM pg_catalog.pg_class c JOIN pg_catalog.pg_namespace n ON n.oid = c.relnamespace"
    " WHERE c.relname = 'store_info' AND n.nspname = current_schema())"
)
SCHEMA_VERSION_SQL = "SELECT value FROM store_info WHERE key = 'schema'"


def first_line(error: BaseException) -> str:
    return (str(error).strip().splitlines() or [type(error).__name__])[0]


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

"""The index schema, written once for both backends: tables of versions, current versions,
artifacts, notes, blobs and the audit log. No connection code here (see the index backends)."""

from __future__ import annotations

__all__ = ["SCHEMA_VERSION", "SCHEMA", "schema_statements", "EMPTY_DIGEST"]

# Schema 1: the first wave's stores (SQLite only; migrated on open by ``migrate.py``).
# Schema 2: identities, current versions, artifacts. Schema 3: the audit log.
SCHEMA_VERSION = 3

# the ``previous`` digest of the first audit entry
EMPTY_DIGEST = "0" * 64

# Versions, artifacts, notes, current-version events and audit entries are only ever inserted.
# ``{id}`` is the row id column, ``{ref}`` a column pointing at one, ``{text}`` a text column
# (PostgreSQL compares it byte by byte, as SQLite does, so both sort names alike).
_TABLES: tuple[str, ...] = (
    """CREATE TABLE IF NOT EXISTS store_info (
        key   {text} PRIMARY KEY,
        value {text} NOT NULL
    )""",
    """CREATE TABLE IF NOT EXISTS blobs (
        digest {text} PRIMARY KEY CHECK (length(digest) = 64),
        size   {ref}  NOT NULL CHECK (size >= 0)
    )""",
    """CREATE TABLE IF NOT EXISTS versions (
        id              {id},
        name            {text}    NOT NULL,
        number          {ref} NOT NULL CHECK (number >= 1),
        parent_id       {ref} REFERENCES versions(id),
        parent_identity {text}    CHECK (parent_identity IS NULL OR length(parent_identity) = 64),
        reason          {text}    NOT NULL CHECK (reason IN ('registered', 'revised', 'retrained', 'initiation-learned')),
        identity        {text}    NOT NULL UNIQUE CHECK (length(identity) = 64),
        origin          {text},
        meta            {text}    NOT NULL,
        content_key     {text}    NOT NULL,
        created_at      {text}    NOT NULL,
        UNIQUE (name, number)
    )""",
    "CREATE INDEX IF NOT EXISTS versions_parent ON versions(parent_id)",
    "CREATE INDEX IF NOT EXISTS versions_content ON versions(name, content_key)",
    """CREATE TABLE IF NOT EXISTS version_files (
        version_id {ref} NOT NULL REFERENCES versions(id),
        role       {text}    NOT NULL,
        digest     {text}    NOT NULL REFERENCES blobs(digest),
        size       {ref} NOT NULL,
        PRIMARY KEY (version_id, role)
    )""",
    "CREATE INDEX IF NOT EXISTS version_files_digest ON version_files(digest)",
    """CREATE TABLE IF NOT EXISTS notes (
        id         {id},
        version_id {ref} NOT NULL REFERENCES versions(id),
        text       {text}    NOT NULL,
        created_at {text}    NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS notes_version ON notes(version_id)",
    """CREATE TABLE IF NOT EXISTS currents (
        id         {id},
        name       {text}    NOT NULL,
        task       {text}    NOT NULL,
        version_id {ref} NOT NULL REFERENCES versions(id),
        reason     {text}    NOT NULL,
        evidence   {text}    NOT NULL,
        created_at {text}    NOT NULL
    )""",
    "CREATE INDEX IF NOT EXISTS currents_name_task ON currents(name, task, id)",
    """CREATE TABLE IF NOT EXISTS artifacts (
        id          {id},
        version_id  {ref} NOT NULL REFERENCES versions(id),
        kind        {text}    NOT NULL,
        revision    {ref} NOT NULL CHECK (revision >= 1),
        computed_on {text}    NOT NULL,
        task        {text}    NOT NULL,
        settings    {text}    NOT NULL,
        software    {text}    NOT NULL,
        meta        {text}    NOT NULL,
        lookup_key  {text}    NOT NULL,
        digest      {text}    NOT NULL CHECK (length(digest) = 64),
        content_key {text}    NOT NULL,
        origin      {text},
        created_at  {text}    NOT NULL,
        UNIQUE (version_id, kind, revision)
    )""",
    "CREATE INDEX IF NOT EXISTS artifacts_lookup ON artifacts(kind, lookup_key)",
    """CREATE TABLE IF NOT EXISTS artifact_files (
        artifact_id {ref} NOT NULL REFERENCES artifacts(id),
        role        {text}    NOT NULL,
        digest      {text}    NOT NULL REFERENCES blobs(digest),
        size        {ref} NOT NULL,
        PRIMARY KEY (artifact_id, role)
    )""",
    "CREATE INDEX IF NOT EXISTS artifact_files_digest ON artifact_files(digest)",
    # who did what when; each entry carries the digest of the one before it (``audit.py``)
    """CREATE TABLE IF NOT EXISTS audit_log (
        seq        {ref} PRIMARY KEY CHECK (seq >= 1),
        actor      {text}    NOT NULL,
        created_at {text}    NOT NULL,
        action     {text}    NOT NULL,
        name       {text},
        subject    {text}    NOT NULL,
        detail     {text}    NOT NULL,
        previous   {text}    NOT NULL CHECK (length(previous) = 64),
        digest     {text}    NOT NULL UNIQUE CHECK (length(digest) = 64)
    )""",
    "CREATE INDEX IF NOT EXISTS audit_log_name ON audit_log(name, seq)",
)

_DIALECTS = {
    "sqlite": {"id": "INTEGER PRIMARY KEY", "ref": "INTEGER", "text": "TEXT"},
    "postgresql": {"id": "BIGINT GENERATED BY DEFAULT AS IDENTITY PRIMARY KEY", "ref": "BIGINT", "text": 'TEXT COLLATE "C"'},
}


def schema_statements(dialect: str) -> tuple[str, ...]:
    """The CREATE statements of the current schema for ``sqlite`` or ``postgresql``."""
    words = _DIALECTS[dialect]
    return tuple(statement.format(**words) for statement in _TABLES)


SCHEMA: tuple[str, ...] = schema_statements("sqlite")

"""Versioned skill store: an index (SQLite embedded, or PostgreSQL for a team) and sha256
content-addressed blobs (a folder, or S3), with lineage, current versions, content identities,
artifacts (stored evidence), an audit log and sealed bundles.

Standard library and platformdirs only, so ``kinetome list/show/lineage`` stay light; the database
driver loads only for a ``postgresql://`` store (read-only stores reach libpq through ctypes, without
psycopg) and the S3 client only for ``s3://`` blobs.
"""

from kinetome.library.store.identity import artifact_digest, lookup_key, version_identity
from kinetome.library.store.audit import ACTOR_ENV_VAR, AUDIT_ACTIONS, AuditEntry
from kinetome.library.store.location import BLOBS_ENV_VAR, STORE_ENV_VAR, is_database_url, resolve_blobs, resolve_store_root
from kinetome.library.store.names import NOMINAL_TASK, format_ref, parse_pin, parse_ref, validate_name, validate_task
from kinetome.library.store.records import (
    ARTIFACT_KINDS,
    REASONS,
    AddResult,
    ArtifactRecord,
    CurrentEntry,
    FileEntry,
    ImportReport,
    ModelRecord,
    Note,
    SkillSummary,
    VersionRecord,
)
from kinetome.library.store.schema import SCHEMA_VERSION
from kinetome.library.store.store import Store
from kinetome.library.store.verify import BlobProblem, BlobUse, VerifyReport

__all__ = [
    "Store",
    "resolve_store_root",
    "resolve_blobs",
    "is_database_url",
    "STORE_ENV_VAR",
    "BLOBS_ENV_VAR",
    "ACTOR_ENV_VAR",
    "AUDIT_ACTIONS",
    "AuditEntry",
    "NOMINAL_TASK",
    "parse_ref",
    "parse_pin",
    "format_ref",
    "validate_name",
    "validate_task",
    "version_identity",
    "artifact_digest",
    "lookup_key",
    "REASONS",
    "ARTIFACT_KINDS",
    "AddResult",
    "FileEntry",
    "VersionRecord",
    "ArtifactRecord",
    "ModelRecord",
    "CurrentEntry",
    "ImportReport",
    "Note",
    "SkillSummary",
    "VerifyReport",
    "BlobProblem",
    "BlobUse",
    "export_bundle",
    "import_bundle",
    "MAX_MEMBER_BYTES",
    "MAX_TOTAL_BYTES",
    "MAX_MEMBERS",
    "SCHEMA_VERSION",
    "copy_store",
    "CopyReport",
]


# Bundles need tarfile (slow to import); list/show/lineage never touch them.
_BUNDLE_NAMES = {"export_bundle", "import_bundle", "MAX_MEMBER_BYTES", "MAX_TOTAL_BYTES", "MAX_MEMBERS"}
_COPY_NAMES = {"copy_store", "CopyReport"}


def __getattr__(name: str):
    if name in _BUNDLE_NAMES:
        from kinetome.library.store import bundle

        return getattr(bundle, name)
    if name in _COPY_NAMES:
        from kinetome.library.store import copy

        return getattr(copy, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

"""Versioned skill store: SQLite index, sha256 content-addressed blobs, lineage, current versions,
content identities, artifacts (stored evidence) and sealed bundles.

Standard library and platformdirs only, so ``kinetome list/show/lineage`` stay light.
"""

from kinetome.library.store.identity import artifact_digest, lookup_key, version_identity
from kinetome.library.store.location import STORE_ENV_VAR, resolve_store_root
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
    "STORE_ENV_VAR",
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
]


# Bundles need tarfile (slow to import); list/show/lineage never touch them.
_BUNDLE_NAMES = {"export_bundle", "import_bundle", "MAX_MEMBER_BYTES", "MAX_TOTAL_BYTES", "MAX_MEMBERS"}


def __getattr__(name: str):
    if name in _BUNDLE_NAMES:
        from kinetome.library.store import bundle

        return getattr(bundle, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

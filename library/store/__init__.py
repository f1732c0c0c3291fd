"""Versioned skill store: SQLite index, sha256 content-addressed blobs, lineage, bundles.

Standard library and platformdirs only, so ``kinetome list/show/history`` stay light.
"""

from kinetome.library.store.location import STORE_ENV_VAR, resolve_store_root
from kinetome.library.store.names import format_ref, parse_ref, validate_name
from kinetome.library.store.records import (
    REASONS,
    AddResult,
    FileEntry,
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
    "parse_ref",
    "format_ref",
    "validate_name",
    "REASONS",
    "AddResult",
    "FileEntry",
    "VersionRecord",
    "ModelRecord",
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


# Bundles need tarfile (slow to import); list/show/history never touch them.
_BUNDLE_NAMES = {"export_bundle", "import_bundle", "MAX_MEMBER_BYTES", "MAX_TOTAL_BYTES", "MAX_MEMBERS"}


def __getattr__(name: str):
    if name in _BUNDLE_NAMES:
        from kinetome.library.store import bundle

        return getattr(bundle, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

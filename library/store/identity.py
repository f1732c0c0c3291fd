"""Content identities of versions and digests of artifacts: sha256 over canonical JSON, no I/O.

A version's identity covers its name, every file (role -> sha256, so spec, parameters,
and for retrains the record, variant and evaluation files), its reason and its
parent's identity, so it names the whole lineage and survives export and import.
Times, local numbers, notes and attached artifacts are not part of it.
"""

from __future__ import annotations

import hashlib
from collections.abc import Mapping, Sequence
from typing import Any

from kinetome.library.store.metadata import canonical_json

__all__ = ["IDENTITY_SCHEME", "ARTIFACT_SCHEME", "version_identity", "artifact_digest", "lookup_key", "content_key"]

IDENTITY_SCHEME = "kinetome.version-identity/1"
ARTIFACT_SCHEME = "kinetome.artifact/1"


def _sha256_json(value: object) -> str:
    return hashlib.sha256(canonical_json(value).encode()).hexdigest()


def content_key(digests: Mapping[str, str]) -> str:
    """sha256 of the canonical role -> digest map: equal keys mean identical files."""
    return _sha256_json(sorted(digests.items()))


def version_identity(name: str, digests: Mapping[str, str], *, parent_identity: str | None, reason: str) -> str:
    """The content identity of a version (64 hex characters)."""
    return _sha256_json(
        {
            "scheme": IDENTITY_SCHEME,
            "name": name,
            "files": dict(sorted(digests.items())),
            "parent": parent_identity,
            "reason": reason,
        }
    )


def lookup_key(kind: str, computed_on: Sequence[str], task: Mapping[str, Any], settings: Mapping[str, Any]) -> str:
    """What makes two pieces of evidence interchangeable: kind, identities (in order), task and settings."""
    return _sha256_json({"kind": kind, "computed_on": list(computed_on), "task": dict(task), "settings": dict(settings)})


def artifact_digest(
    *,
    kind: str,
    computed_on: Sequence[str],
    task: Mapping[str, Any],
    settings: Mapping[str, Any],
    software: Mapping[str, Any],
    files: Mapping[str, str],
    meta: Mapping[str, Any],
) -> str:
    """The digest of an artifact: its provenance, its files (role -> sha256) and its metadata."""
    return _sha256_json(
        {
            "scheme": ARTIFACT_SCHEME,
            "kind": kind,
            "computed_on": list(computed_on),
            "task": dict(task),
            "settings": dict(settings),
            "software": dict(software),
            "files": dict(sorted(files.items())),
            "meta": dict(meta),
        }
    )

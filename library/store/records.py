"""Immutable records the store hands out: versions, files, artifacts, current versions, notes, summaries."""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from typing import Any

from kinetome.library.errors import NotFoundError
from kinetome.library.store.names import format_ref, validate_kind, validate_name

__all__ = [
    "REASONS",
    "ARTIFACT_KINDS",
    "is_digest",
    "FileEntry",
    "VersionRecord",
    "ArtifactRecord",
    "ModelRecord",
    "CurrentEntry",
    "Note",
    "SkillSummary",
    "AddResult",
    "ImportReport",
]

# Why a version exists. An imported version keeps its reason; where it came from is its ``origin``.
REASONS = ("registered", "revised", "retrained", "initiation-learned")
# The kinds of evidence kinetome itself attaches (any valid kind name may be attached).
ARTIFACT_KINDS = ("option-models", "check-result", "sweep", "initiation-proposal")

_DIGEST_RE = re.compile(r"[0-9a-f]{64}")


def is_digest(text: object) -> bool:
    """True for a lowercase hex sha256 digest."""
    return isinstance(text, str) and _DIGEST_RE.fullmatch(text) is not None


@dataclass(frozen=True)
class FileEntry:
    """One stored file: its role in the version (e.g. ``spec.json``), sha256 and size in bytes."""

    role: str
    digest: str
    size: int

    def __post_init__(self) -> None:
        if not is_digest(self.digest):
            raise ValueError(f"FileEntry.digest must be 64 lowercase hex characters, got {self.digest!r}")
        if not isinstance(self.size, int) or self.size < 0:
            raise ValueError(f"FileEntry.size must be an int >= 0, got {self.size!r}")


def _lookup(owner: str, files: tuple[FileEntry, ...], role: str) -> FileEntry:
    for entry in files:
        if entry.role == role:
            return entry
    roles = ", ".join(e.role for e in files) or "(none)"
    raise NotFoundError(f"{owner} has no file with role {role!r}; its files are: {roles}")


class _StoredFiles:
    """What versions and model revisions share: files by role and JSON meta."""

    files: tuple[FileEntry, ...]
    meta_json: str
    ref: str

    @property
    def meta(self) -> dict[str, Any]:
        """A fresh dict each call, so a record can never be changed through it."""
        return json.loads(self.meta_json)

    @property
    def roles(self) -> tuple[str, ...]:
        return tuple(e.role for e in self.files)

    @property
    def digests(self) -> dict[str, str]:
        """role -> sha256 digest."""
        return {e.role: e.digest for e in self.files}

    def file(self, role: str) -> FileEntry:
        """The entry of ``role``; NotFoundError lists the roles the record has."""
        return _lookup(self.ref, self.files, role)


@dataclass(frozen=True)
class VersionRecord(_StoredFiles):
    """One immutable version ``name@N``: files, lineage and metadata.

    ``meta_json`` is the canonical JSON text; ``meta`` returns a fresh dict each
    call, so a record can never be changed through it.
    """

    name: str
    number: int
    files: tuple[FileEntry, ...]
    parent: str | None
    reason: str
    meta_json: str
    created_at: str
    identity: str
    parent_identity: str | None
    origin_json: str | None  # where an imported version came from: store, original ref, created_at

    def __post_init__(self) -> None:
        validate_name(self.name)
        if not is_digest(self.identity):
            raise ValueError(f"VersionRecord.identity must be 64 lowercase hex characters, got {self.identity!r}")
        if not isinstance(self.number, int) or self.number < 1:
            raise ValueError(f"VersionRecord.number must be an int >= 1, got {self.number!r}")
        if self.reason not in REASONS:
            raise ValueError(f"VersionRecord.reason must be one of {REASONS}, got {self.reason!r}")

    @property
    def ref(self) -> str:
        return format_ref(self.name, self.number)

    @property
    def identity_ref(self) -> str:
        """The portable pin ``name@id:<first 16 hex>``."""
        return f"{self.name}@id:{self.identity[:16]}"

    @property
    def origin(self) -> dict[str, Any] | None:
        return None if self.origin_json is None else json.loads(self.origin_json)


@dataclass(frozen=True)
class ArtifactRecord(_StoredFiles):
    """One revision of a piece of evidence attached to a version, written ``name@N/kind#R``.

    ``computed_on`` lists the content identities it was computed on (in order, e.g. a
    chain's skills), ``task`` and ``settings`` what it was computed for, ``software``
    the versions it was computed with, and ``digest`` covers all of that and the files.
    """

    version: str
    kind: str
    revision: int
    files: tuple[FileEntry, ...]
    meta_json: str
    created_at: str
    computed_on: tuple[str, ...]
    task_json: str
    settings_json: str
    software_json: str
    digest: str
    origin_json: str | None = None

    def __post_init__(self) -> None:
        validate_kind(self.kind)
        if not isinstance(self.revision, int) or self.revision < 1:
            raise ValueError(f"ArtifactRecord.revision must be an int >= 1, got {self.revision!r}")

    @property
    def ref(self) -> str:
        return f"{self.version}/{self.kind}#{self.revision}"

    @property
    def task(self) -> dict[str, Any]:
        return json.loads(self.task_json)

    @property
    def settings(self) -> dict[str, Any]:
        return json.loads(self.settings_json)

    @property
    def software(self) -> dict[str, Any]:
        return json.loads(self.software_json)

    @property
    def origin(self) -> dict[str, Any] | None:
        return None if self.origin_json is None else json.loads(self.origin_json)


ModelRecord = ArtifactRecord  # option models are artifacts of kind "option-models"


@dataclass(frozen=True)
class CurrentEntry:
    """A skill's current version for one task, and why: ``reason`` and JSON ``evidence``."""

    name: str
    task: str
    version: str
    reason: str
    evidence_json: str
    created_at: str

    @property
    def evidence(self) -> dict[str, Any]:
        return json.loads(self.evidence_json)


@dataclass(frozen=True)
class Note:
    """A free-text note appended to a version; ``index`` counts from 1 per version."""

    version: str
    index: int
    text: str
    created_at: str


@dataclass(frozen=True)
class SkillSummary:
    """One line of ``kinetome list``: a skill name and its latest version."""

    name: str
    latest: int
    count: int
    latest_created_at: str
    description: str | None
    env: str | None
    current: int | None = None  # number of the current version for nominal (None: never set)

    @property
    def latest_ref(self) -> str:
        return format_ref(self.name, self.latest)

    @property
    def current_ref(self) -> str:
        """The version a bare name resolves to on the nominal task."""
        return format_ref(self.name, self.current if self.current is not None else self.latest)


@dataclass(frozen=True)
class AddResult:
    """What ``Store.add`` / ``Store.register`` did: the version, and whether it is new."""

    version: VersionRecord
    is_new: bool

    @property
    def created(self) -> bool:
        """Old name of ``is_new``."""
        return self.is_new


@dataclass(frozen=True)
class ImportReport:
    """What ``import_bundle`` did: the store's versions for the bundle's (parents first),
    which refs are new here, the current versions it set, and warnings (e.g. an unsealed old bundle)."""

    versions: tuple[VersionRecord, ...]
    added: tuple[str, ...]
    currents_set: tuple[str, ...]
    root_identity: str
    warnings: tuple[str, ...] = ()
    signature: str = "unsigned"  # "verified", "unsigned" or "unchecked" (signed, no key given)
    signed_with: str | None = None  # the key id the bundle names

"""Immutable records the store hands out: versions, files, models, notes, summaries."""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from typing import Any

from kinetome.library.errors import NotFoundError
from kinetome.library.store.names import format_ref, validate_kind, validate_name

__all__ = [
    "REASONS",
    "is_digest",
    "FileEntry",
    "VersionRecord",
    "ModelRecord",
    "Note",
    "SkillSummary",
    "AddResult",
]

REASONS = ("registered", "retrained", "imported")

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

    def __post_init__(self) -> None:
        validate_name(self.name)
        if not isinstance(self.number, int) or self.number < 1:
            raise ValueError(f"VersionRecord.number must be an int >= 1, got {self.number!r}")
        if self.reason not in REASONS:
            raise ValueError(f"VersionRecord.reason must be one of {REASONS}, got {self.reason!r}")

    @property
    def ref(self) -> str:
        return format_ref(self.name, self.number)



@dataclass(frozen=True)
class ModelRecord(_StoredFiles):
    """One revision of an option model attached to a version, written ``name@N/kind#R``."""

    version: str
    kind: str
    revision: int
    files: tuple[FileEntry, ...]
    meta_json: str
    created_at: str

    def __post_init__(self) -> None:
        validate_kind(self.kind)
        if not isinstance(self.revision, int) or self.revision < 1:
            raise ValueError(f"ModelRecord.revision must be an int >= 1, got {self.revision!r}")

    @property
    def ref(self) -> str:
        return f"{self.version}/{self.kind}#{self.revision}"



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

    @property
    def latest_ref(self) -> str:
        return format_ref(self.name, self.latest)


@dataclass(frozen=True)
class AddResult:
    """What ``Store.add`` did: the version, and whether it was newly created."""

    version: VersionRecord
    created: bool

    @property
    def is_new(self) -> bool:
        """Whether this call stored a new version (False: identical content existed)."""
        return self.created

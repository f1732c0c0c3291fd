"""Stored evidence for reuse: check results, sweep results and learned-initiation proposals are
artifacts of a version, found again by the chain of identities, task and settings they were
computed on (and, by default, the same software versions).

Light: standard library only; results are JSON values.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from .provenance import software_versions
from .store.metadata import canonical_json

__all__ = [
    "RESULT_FILE",
    "StoredResult",
    "identities_of",
    "store_result",
    "find_result",
    "store_check_result",
    "find_check_result",
]

RESULT_FILE = "result.json"
CURRENT = "current"  # software=CURRENT: match the versions of this process


@dataclass(frozen=True)
class StoredResult:
    """A result read back from the store; ``reused`` is True when it was found, not computed now."""

    result: Any
    artifact: Any  # ArtifactRecord
    reused: bool


def identities_of(store: Any, refs: Sequence[str], *, task: Mapping | None = None) -> list[str]:
    """Content identities of ``refs`` in order; bare names resolve to the current version for the task's variant."""
    variant = (task or {}).get("variant")
    return [store.get(ref, task=variant if isinstance(variant, str) else None).identity for ref in refs]


def _software(software: Mapping | str | None) -> Mapping | None:
    return software_versions() if software == CURRENT else software  # type: ignore[return-value]


def store_result(
    store: Any,
    kind: str,
    refs: Sequence[str],
    *,
    task: Mapping | None,
    settings: Mapping | None,
    result: Any,
    software: Mapping | str = CURRENT,
    meta: Mapping | None = None,
    extra_files: Mapping[str, bytes] | None = None,
) -> Any:
    """Attach ``result`` (a JSON value) as evidence ``kind`` to the first version of ``refs``,
    computed on all of their identities; ``extra_files`` (role -> bytes) are stored beside it
    (e.g. the text a person read). Returns the ArtifactRecord."""
    ids = identities_of(store, refs, task=task)
    data = canonical_json(result).encode("utf-8")
    owner = f"{store.get(refs[0], task=(task or {}).get('variant')).name}@id:{ids[0]}"
    return store.attach_artifact(
        owner, kind, {**(extra_files or {}), RESULT_FILE: data}, computed_on=ids, task=task, settings=settings, software=_software(software), meta=meta
    )


def find_result(
    store: Any,
    kind: str,
    refs: Sequence[str],
    *,
    task: Mapping | None,
    settings: Mapping | None,
    software: Mapping | str | None = CURRENT,
) -> StoredResult | None:
    """The stored ``kind`` result for these versions, task and settings (and software), or None."""
    ids = identities_of(store, refs, task=task)
    found = store.find_artifact(kind, computed_on=ids, task=task, settings=settings, software=_software(software))
    if found is None:
        return None
    return StoredResult(json.loads(store.read_artifact(found, RESULT_FILE)), found, reused=True)


def store_check_result(store: Any, refs: Sequence[str], **kwargs: Any) -> Any:
    """``store_result`` for a chain check (kind ``check-result``)."""
    return store_result(store, "check-result", refs, **kwargs)


def find_check_result(store: Any, refs: Sequence[str], **kwargs: Any) -> StoredResult | None:
    """``find_result`` for a chain check (kind ``check-result``)."""
    return find_result(store, "check-result", refs, **kwargs)

"""Format-1 bundles (the first wave's, without a seal): read into the format-2 structures.

Reasons and origins follow ``legacy.reason_and_origin``; identities are computed from the
files and the lineage inside the bundle; option-model revisions become artifacts.
"""

from __future__ import annotations

from typing import Any

from kinetome.library.store.identity import artifact_digest, version_identity
from kinetome.library.store.legacy import LEGACY_IMPORTED, model_task_and_settings, reason_and_origin
from kinetome.library.store.manifest import BundleArtifact, BundleVersion, Manifest, _finish, check_order
from kinetome.library.store.manifest_fields import (
    checked,
    fail,
    get,
    parse_blobs,
    parse_files,
    parse_meta,
    parse_notes,
    parse_optional_ref,
    parse_version_ref,
)
from kinetome.library.store.names import validate_kind

__all__ = ["parse_v1"]

_V1_REASONS = ("registered", "retrained", LEGACY_IMPORTED)


def _models(obj: object, path: str, owner: str, identity: str, blobs: dict[str, int]) -> list[BundleArtifact]:
    if not isinstance(obj, list):
        raise fail(path, "be a list", obj)
    out = []
    for i, m in enumerate(obj):
        where = f"{path}[{i}]"
        if not isinstance(m, dict):
            raise fail(where, "be an object", m)
        kind = checked(validate_kind, get(m, "kind", str, where, "be a model kind"), f"{where}.kind", "be a model kind")
        revision = get(m, "revision", int, where, "be a whole number >= 1")
        if revision < 1:
            raise fail(f"{where}.revision", "be a whole number >= 1", revision)
        meta = parse_meta(m.get("meta", {}), f"{where}.meta")
        files = parse_files(m.get("files"), f"{where}.files", blobs)
        task, settings = model_task_and_settings(meta)
        digest = artifact_digest(
            kind=kind, computed_on=[identity], task=task, settings=settings, software={},
            files={e.role: e.digest for e in files}, meta=meta,
        )
        created_at = get(m, "created_at", str, where, "be an ISO 8601 time")
        out.append(BundleArtifact(owner, kind, revision, created_at, (identity,), task, settings, {}, meta, digest, None, files))
    return out


def _version(obj: object, path: str, blobs: dict[str, int], identities: dict[str, str]) -> tuple[BundleVersion, list]:
    if not isinstance(obj, dict):
        raise fail(path, "be an object", obj)
    ref, name, number = parse_version_ref(obj, "ref", path)
    parent = parse_optional_ref(obj, "parent", path)
    reason = get(obj, "reason", str, path, f"be one of {_V1_REASONS}")
    if reason not in _V1_REASONS:
        raise fail(f"{path}.reason", f"be one of {_V1_REASONS}", reason)
    meta = parse_meta(obj.get("meta", {}), f"{path}.meta")
    reason, origin = reason_and_origin(reason, meta)
    created_at = get(obj, "created_at", str, path, "be an ISO 8601 time")
    if origin is None:
        origin = {"store": None, "ref": ref, "created_at": created_at}
    files = parse_files(obj.get("files"), f"{path}.files", blobs)
    parent_identity = identities.get(parent) if parent is not None else None
    identity = version_identity(name, {e.role: e.digest for e in files}, parent_identity=parent_identity, reason=reason)
    version = BundleVersion(
        ref=ref, name=name, number=number, identity=identity, parent=parent if parent_identity else None,
        parent_identity=parent_identity, reason=reason, origin=origin, created_at=created_at, meta=meta, files=files,
        notes=parse_notes(obj.get("notes", []), f"{path}.notes"), current_for=(),
    )
    return version, _models(obj.get("models", []), f"{path}.models", ref, identity, blobs)


def parse_v1(doc: dict[str, Any]) -> Manifest:
    blobs = parse_blobs(doc.get("blobs"))
    versions_obj = doc.get("versions")
    if not isinstance(versions_obj, list) or not versions_obj:
        raise fail("versions", "be a non-empty list", versions_obj)
    identities: dict[str, str] = {}
    versions, artifacts = [], []
    for i, obj in enumerate(versions_obj):
        version, models = _version(obj, f"versions[{i}]", blobs, identities)
        check_order(versions_obj, i, version.ref, parse_optional_ref(obj, "parent", f"versions[{i}]"), seen=identities)
        identities[version.ref] = version.identity
        versions.append(version)
        artifacts += models
    return _finish(doc, versions, artifacts, blobs, format_version=1)

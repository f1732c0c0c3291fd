"""The bundle manifest and its seal: build them from store records, parse and check untrusted ones.

A format-2 bundle holds ``seal.json`` (the sha256 of ``manifest.json`` and the root's
identity), ``manifest.json`` (versions with identities, lineage, origin, notes, metadata
and current tasks; artifacts with their provenance and digests; blob sizes) and
``blobs/<sha256>``. Import recomputes every identity and artifact digest from the files.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from typing import Any

from kinetome.library.errors import BundleError
from kinetome.library.safety import CAUTION
from kinetome.library.store.identity import artifact_digest, version_identity
from kinetome.library.store.manifest_fields import (
    MANIFEST_NAME,
    checked,
    fail,
    get,
    parse_blobs,
    parse_files,
    parse_identity,
    parse_meta,
    parse_notes,
    parse_optional_ref,
    parse_version_ref,
)
from kinetome.library.store.names import validate_kind, validate_task
from kinetome.library.store.records import REASONS, ArtifactRecord, FileEntry, Note, VersionRecord

__all__ = [
    "BUNDLE_FORMAT",
    "BUNDLE_FORMAT_VERSION",
    "MANIFEST_NAME",
    "SEAL_NAME",
    "BUNDLE_NOTICE",
    "BundleArtifact",
    "BundleVersion",
    "Manifest",
    "build_manifest",
    "build_seal",
    "parse_manifest",
    "check_seal",
]

BUNDLE_FORMAT = "kinetome-bundle"
BUNDLE_FORMAT_VERSION = 2
MANIFEST_NAME = MANIFEST_NAME
SEAL_NAME = "seal.json"
SEAL_FORMAT = "kinetome-bundle-seal"
BUNDLE_NOTICE = CAUTION  # written into every manifest


@dataclass(frozen=True)
class BundleArtifact:
    owner: str  # ref of the version in the bundle it is attached to
    kind: str
    revision: int
    created_at: str
    computed_on: tuple[str, ...]
    task: dict[str, Any]
    settings: dict[str, Any]
    software: dict[str, Any]
    meta: dict[str, Any]
    digest: str
    origin: dict[str, Any] | None
    files: tuple[FileEntry, ...]

    @property
    def ref(self) -> str:
        return f"{self.owner}/{self.kind}#{self.revision}"


@dataclass(frozen=True)
class BundleVersion:
    ref: str
    name: str
    number: int
    identity: str
    parent: str | None
    parent_identity: str | None
    reason: str
    origin: dict[str, Any] | None
    created_at: str
    meta: dict[str, Any]
    files: tuple[FileEntry, ...]
    notes: tuple[tuple[str, str], ...]  # (text, created_at)
    current_for: tuple[str, ...]


@dataclass(frozen=True)
class Manifest:
    format_version: int
    store_id: str | None  # the exporting store
    root: str
    versions: tuple[BundleVersion, ...]  # parents before children
    artifacts: tuple[BundleArtifact, ...]
    blobs: dict[str, int]  # digest -> size

    @property
    def root_identity(self) -> str:
        return next(v.identity for v in self.versions if v.ref == self.root)


def _files_json(files: tuple[FileEntry, ...]) -> dict[str, dict[str, Any]]:
    return {e.role: {"digest": e.digest, "size": e.size} for e in files}


def _version_entry(v: VersionRecord, notes: list[Note], current_for: list[str]) -> dict[str, Any]:
    return {
        "ref": v.ref,
        "identity": v.identity,
        "parent": v.parent,
        "parent_identity": v.parent_identity,
        "reason": v.reason,
        "origin": v.origin,
        "created_at": v.created_at,
        "meta": v.meta,
        "files": _files_json(v.files),
        "notes": [{"text": n.text, "created_at": n.created_at} for n in notes],
        "current_for": current_for,
    }


def _artifact_entry(a: ArtifactRecord) -> dict[str, Any]:
    return {
        "owner": a.version,
        "kind": a.kind,
        "revision": a.revision,
        "created_at": a.created_at,
        "computed_on": list(a.computed_on),
        "task": a.task,
        "settings": a.settings,
        "software": a.software,
        "meta": a.meta,
        "digest": a.digest,
        "origin": a.origin,
        "files": _files_json(a.files),
    }


def build_manifest(
    store_id: str,
    root: str,
    versions: list[VersionRecord],
    artifacts: list[ArtifactRecord],
    notes: dict[str, list[Note]],
    current_for: dict[str, list[str]],
) -> bytes:
    """Manifest bytes for ``versions`` (parents first), their artifacts, notes and current tasks."""
    blobs = {e.digest: e.size for owner in [*versions, *artifacts] for e in owner.files}
    doc = {
        "format": BUNDLE_FORMAT,
        "format_version": BUNDLE_FORMAT_VERSION,
        "notice": BUNDLE_NOTICE,
        "store": {"id": store_id},
        "root": root,
        "versions": [_version_entry(v, notes.get(v.ref, []), current_for.get(v.ref, [])) for v in versions],
        "artifacts": [_artifact_entry(a) for a in artifacts],
        "blobs": dict(sorted(blobs.items())),
    }
    return (json.dumps(doc, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode()


def build_seal(manifest: bytes, root_identity: str) -> bytes:
    doc = {
        "format": SEAL_FORMAT,
        "manifest_sha256": hashlib.sha256(manifest).hexdigest(),
        "root_identity": root_identity,
    }
    return (json.dumps(doc, indent=1, sort_keys=True) + "\n").encode()


def check_seal(seal: bytes | None, manifest: bytes) -> dict[str, Any]:
    """The seal's fields, after checking that it covers exactly these manifest bytes."""
    if seal is None:
        raise BundleError(f"the bundle has no member {SEAL_NAME!r}, which a format-2 bundle must have; refused (re-export it)")
    try:
        doc = json.loads(seal.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as e:
        raise BundleError(f"member {SEAL_NAME!r} is not JSON text ({e}); the bundle was damaged or altered") from None
    if not isinstance(doc, dict) or doc.get("format") != SEAL_FORMAT:
        raise BundleError(f"member {SEAL_NAME!r} must be a {SEAL_FORMAT!r} object; the bundle was damaged or altered")
    actual = hashlib.sha256(manifest).hexdigest()
    if doc.get("manifest_sha256") != actual:
        raise BundleError(
            f"member {MANIFEST_NAME!r} has sha256 {actual}, but {SEAL_NAME!r} seals {str(doc.get('manifest_sha256'))!r:.80}: "
            "the manifest (metadata, notes, lineage or evidence) was changed after export; refused"
        )
    return doc


# -- parsing an untrusted manifest -----------------------------------------------------


def _parse_origin(obj: object, path: str) -> dict[str, Any] | None:
    if obj is None:
        return None
    meta = parse_meta(obj, path)
    ref = meta.get("ref")
    if ref is not None and not isinstance(ref, str):
        raise fail(f"{path}.ref", "be null or a ref name@N", ref)
    return meta


def _parse_version(obj: object, path: str, blobs: dict[str, int], identities: dict[str, str]) -> BundleVersion:
    if not isinstance(obj, dict):
        raise fail(path, "be an object", obj)
    ref, name, number = parse_version_ref(obj, "ref", path)
    parent = parse_optional_ref(obj, "parent", path)
    parent_identity = parse_identity(obj.get("parent_identity"), f"{path}.parent_identity", optional=True)
    if parent is not None and parent in identities and identities[parent] != parent_identity:
        raise fail(f"{path}.parent_identity", f"equal the identity of {parent} in this bundle", parent_identity)
    reason = get(obj, "reason", str, path, f"be one of {REASONS}")
    if reason not in REASONS:
        raise fail(f"{path}.reason", f"be one of {REASONS}", reason)
    files = parse_files(obj.get("files"), f"{path}.files", blobs)
    identity = parse_identity(obj.get("identity"), f"{path}.identity")
    expected = version_identity(name, {e.role: e.digest for e in files}, parent_identity=parent_identity, reason=reason)
    if identity != expected:
        raise fail(f"{path}.identity", f"be the identity of its files, reason and parent ({expected[:12]}...)", identity)
    current_for = obj.get("current_for", [])
    if not isinstance(current_for, list):
        raise fail(f"{path}.current_for", "be a list of task names", current_for)
    return BundleVersion(
        ref=ref,
        name=name,
        number=number,
        identity=identity,
        parent=parent,
        parent_identity=parent_identity,
        reason=reason,
        origin=_parse_origin(obj.get("origin"), f"{path}.origin"),
        created_at=get(obj, "created_at", str, path, "be an ISO 8601 time"),
        meta=parse_meta(obj.get("meta", {}), f"{path}.meta"),
        files=files,
        notes=parse_notes(obj.get("notes", []), f"{path}.notes"),
        current_for=tuple(checked(validate_task, t, f"{path}.current_for", "hold task names") for t in current_for),
    )


def _parse_artifact(obj: object, path: str, blobs: dict[str, int], refs: set[str]) -> BundleArtifact:
    if not isinstance(obj, dict):
        raise fail(path, "be an object", obj)
    owner, _, _ = parse_version_ref(obj, "owner", path)
    if owner not in refs:
        raise fail(f"{path}.owner", "be the ref of a version in this bundle", owner)
    kind = checked(validate_kind, get(obj, "kind", str, path, "be an artifact kind"), f"{path}.kind", "be an artifact kind")
    revision = get(obj, "revision", int, path, "be a whole number >= 1")
    if revision < 1:
        raise fail(f"{path}.revision", "be a whole number >= 1", revision)
    computed_on = get(obj, "computed_on", list, path, "be a list of identities")
    ids = tuple(parse_identity(x, f"{path}.computed_on[{i}]") for i, x in enumerate(computed_on))
    parts = {k: parse_meta(obj.get(k, {}), f"{path}.{k}") for k in ("task", "settings", "software", "meta")}
    files = parse_files(obj.get("files"), f"{path}.files", blobs)
    digest = parse_identity(obj.get("digest"), f"{path}.digest")
    expected = artifact_digest(kind=kind, computed_on=ids, files={e.role: e.digest for e in files}, **parts)
    if digest != expected:
        raise fail(f"{path}.digest", f"be the digest of its provenance, metadata and files ({expected[:12]}...)", digest)
    return BundleArtifact(
        owner=owner, kind=kind, revision=revision, created_at=get(obj, "created_at", str, path, "be an ISO 8601 time"),
        computed_on=ids, digest=digest, origin=_parse_origin(obj.get("origin"), f"{path}.origin"), files=files, **parts,
    )


def _decode(data: bytes) -> dict:
    try:
        doc = json.loads(data.decode("utf-8"))
    except UnicodeDecodeError as e:
        raise BundleError(
            f"member {MANIFEST_NAME!r} is not UTF-8 text ({e.reason} at byte {e.start}); re-export the bundle"
        ) from None
    except json.JSONDecodeError as e:
        raise BundleError(
            f"member {MANIFEST_NAME!r} is not valid JSON: {e.msg} at line {e.lineno} column {e.colno}; re-export the bundle"
        ) from None
    if not isinstance(doc, dict):
        raise fail("the top level", "be a JSON object", type(doc).__name__)
    if doc.get("format") != BUNDLE_FORMAT:
        raise fail("format", f"be {BUNDLE_FORMAT!r}", doc.get("format"))
    return doc


def manifest_format(data: bytes) -> int:
    """The format version a manifest declares (1 or 2); BundleError for anything else."""
    fv = _decode(data).get("format_version")
    if fv not in (1, BUNDLE_FORMAT_VERSION) or isinstance(fv, bool):
        raise fail("format_version", f"be 1 or {BUNDLE_FORMAT_VERSION} (upgrade kinetome for newer bundles)", fv)
    return int(fv)


def parse_manifest(data: bytes) -> Manifest:
    """Parse and check manifest bytes of either format; every problem is a BundleError naming the field."""
    doc = _decode(data)
    if manifest_format(data) == 1:
        from kinetome.library.store.manifest_v1 import parse_v1

        return parse_v1(doc)
    blobs = parse_blobs(doc.get("blobs"))
    versions_obj = doc.get("versions")
    if not isinstance(versions_obj, list) or not versions_obj:
        raise fail("versions", "be a non-empty list", versions_obj)
    identities: dict[str, str] = {}
    versions = []
    for i, obj in enumerate(versions_obj):
        v = _parse_version(obj, f"versions[{i}]", blobs, identities)
        check_order(versions_obj, i, v.ref, v.parent, seen=identities)
        identities[v.ref] = v.identity
        versions.append(v)
    artifacts_obj = doc.get("artifacts", [])
    if not isinstance(artifacts_obj, list):
        raise fail("artifacts", "be a list", artifacts_obj)
    artifacts = [_parse_artifact(a, f"artifacts[{i}]", blobs, set(identities)) for i, a in enumerate(artifacts_obj)]
    return _finish(doc, versions, artifacts, blobs, format_version=2)


def check_order(entries: list, i: int, ref: str, parent: str | None, *, seen: dict[str, str]) -> None:
    """Refs are unique and parents come before their children."""
    if ref in seen:
        raise fail(f"versions[{i}].ref", "be unique in the bundle", ref)
    later = {x.get("ref") for x in entries[i + 1 :] if isinstance(x, dict)}
    if parent is not None and parent not in seen and (parent in later or parent == ref):
        raise fail(f"versions[{i}].parent", "come earlier in the list (parents first)", parent)


def _finish(doc: dict, versions: list, artifacts: list, blobs: dict[str, int], *, format_version: int) -> Manifest:
    """Checks shared by both formats: each artifact revision once, every blob used, a root among the versions."""
    keys = [(a.owner, a.kind, a.revision) for a in artifacts]
    if len(set(keys)) != len(keys):
        raise fail("artifacts", "hold each (owner, kind, revision) once", keys)
    used = {e.digest for owner in [*versions, *artifacts] for e in owner.files}
    unused = sorted(set(blobs) - used)
    if unused:
        raise fail(f"blobs[{unused[0]!r}]", "be used by a version or artifact file", "unused")
    root = doc.get("root")
    if root not in {v.ref for v in versions}:
        raise fail("root", "be the ref of one of the versions", root)
    store = doc.get("store") if isinstance(doc.get("store"), dict) else {}
    store_id = store.get("id") if isinstance(store.get("id"), str) else None
    return Manifest(format_version, store_id, root, tuple(versions), tuple(artifacts), blobs)

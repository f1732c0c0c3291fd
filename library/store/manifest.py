"""The bundle manifest: build it from store records, and parse/validate an untrusted one."""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from kinetome.library.errors import BundleError, InvalidInputError
from kinetome.library.safety import CAUTION
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.names import parse_ref, validate_kind, validate_role
from kinetome.library.store.records import REASONS, FileEntry, ModelRecord, Note, VersionRecord, is_digest

__all__ = [
    "BUNDLE_FORMAT",
    "BUNDLE_FORMAT_VERSION",
    "MANIFEST_NAME",
    "BUNDLE_NOTICE",
    "BundleModel",
    "BundleVersion",
    "Manifest",
    "build_manifest",
    "parse_manifest",
]

BUNDLE_FORMAT = "kinetome-bundle"
BUNDLE_FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.json"
BUNDLE_NOTICE = CAUTION  # written into every manifest


@dataclass(frozen=True)
class BundleModel:
    kind: str
    revision: int
    created_at: str
    meta: dict[str, Any]
    files: tuple[FileEntry, ...]


@dataclass(frozen=True)
class BundleVersion:
    ref: str
    name: str
    number: int
    parent: str | None
    reason: str
    created_at: str
    meta: dict[str, Any]
    files: tuple[FileEntry, ...]
    notes: tuple[tuple[str, str], ...]  # (text, created_at)
    models: tuple[BundleModel, ...]


@dataclass(frozen=True)
class Manifest:
    root: str
    versions: tuple[BundleVersion, ...]  # parents before children
    blobs: dict[str, int]  # digest -> size


def _files_json(files: tuple[FileEntry, ...]) -> dict[str, dict[str, Any]]:
    return {e.role: {"digest": e.digest, "size": e.size} for e in files}


def build_manifest(
    root: str,
    versions: list[VersionRecord],
    models: dict[str, list[ModelRecord]],
    notes: dict[str, list[Note]],
) -> bytes:
    """Manifest bytes for ``versions`` (parents first), with their models and notes."""
    blobs: dict[str, int] = {}
    entries = []
    for v in versions:
        for e in v.files:
            blobs[e.digest] = e.size
        model_entries = []
        for m in models.get(v.ref, []):
            for e in m.files:
                blobs[e.digest] = e.size
            model_entries.append(
                {
                    "kind": m.kind,
                    "revision": m.revision,
                    "created_at": m.created_at,
                    "meta": m.meta,
                    "files": _files_json(m.files),
                }
            )
        entries.append(
            {
                "ref": v.ref,
                "parent": v.parent,
                "reason": v.reason,
                "created_at": v.created_at,
                "meta": v.meta,
                "files": _files_json(v.files),
                "notes": [{"text": n.text, "created_at": n.created_at} for n in notes.get(v.ref, [])],
                "models": model_entries,
            }
        )
    doc = {
        "format": BUNDLE_FORMAT,
        "format_version": BUNDLE_FORMAT_VERSION,
        "notice": BUNDLE_NOTICE,
        "root": root,
        "versions": entries,
        "blobs": dict(sorted(blobs.items())),
    }
    return (json.dumps(doc, indent=1, sort_keys=True, ensure_ascii=False) + "\n").encode()


# -- parsing an untrusted manifest -----------------------------------------------------


def _fail(path: str, rule: str, got: object) -> BundleError:
    return BundleError(f"member {MANIFEST_NAME!r}: {path} must {rule}, got {got!r:.120}; re-export the bundle")


def _get(obj: dict, key: str, kind: type | tuple[type, ...], path: str, rule: str) -> Any:
    if key not in obj:
        raise BundleError(f"member {MANIFEST_NAME!r}: {path}.{key} is missing; re-export the bundle")
    value = obj[key]
    if not isinstance(value, kind) or (kind is int and isinstance(value, bool)):
        raise _fail(f"{path}.{key}", rule, value)
    return value


def _checked(fn, value, path: str, rule: str):
    try:
        return fn(value)
    except InvalidInputError:
        raise _fail(path, rule, value) from None


def _parse_files(obj: object, path: str, blobs: dict[str, int]) -> tuple[FileEntry, ...]:
    if not isinstance(obj, dict) or not obj:
        raise _fail(path, "be a non-empty object of role -> {digest, size}", obj)
    out = []
    for role, spec in sorted(obj.items()):
        _checked(validate_role, role, f"{path} key", "be a valid file role")
        where = f"{path}[{role!r}]"
        if not isinstance(spec, dict):
            raise _fail(where, "be an object {digest, size}", spec)
        digest = _get(spec, "digest", str, where, "be a sha256 hex digest")
        size = _get(spec, "size", int, where, "be a whole number of bytes")
        if not is_digest(digest):
            raise _fail(f"{where}.digest", "be 64 lowercase hex characters", digest)
        if digest not in blobs:
            raise _fail(f"{where}.digest", "be listed in blobs", digest)
        if blobs[digest] != size:
            raise _fail(f"{where}.size", f"equal the size listed in blobs ({blobs[digest]})", size)
        out.append(FileEntry(role, digest, size))
    return tuple(out)


def _parse_meta(obj: object, path: str) -> dict[str, Any]:
    try:
        return json.loads(canonical_meta(obj, what=path))
    except InvalidInputError as e:
        raise BundleError(f"member {MANIFEST_NAME!r}: {e}; re-export the bundle") from None


def _parse_version(obj: object, path: str, blobs: dict[str, int]) -> BundleVersion:
    if not isinstance(obj, dict):
        raise _fail(path, "be an object", obj)
    ref = _get(obj, "ref", str, path, "be a ref name@N")
    name, number = _checked(parse_ref, ref, f"{path}.ref", "be a ref name@N")
    if number is None:
        raise _fail(f"{path}.ref", "be a ref name@N with a number", ref)
    parent = obj.get("parent")
    if parent is not None:
        if not isinstance(parent, str) or _checked(parse_ref, parent, f"{path}.parent", "be null or a ref name@N")[1] is None:
            raise _fail(f"{path}.parent", "be null or a ref name@N", parent)
    reason = _get(obj, "reason", str, path, f"be one of {REASONS}")
    if reason not in REASONS:
        raise _fail(f"{path}.reason", f"be one of {REASONS}", reason)
    created_at = _get(obj, "created_at", str, path, "be an ISO 8601 time")
    notes_obj = obj.get("notes", [])
    if not isinstance(notes_obj, list):
        raise _fail(f"{path}.notes", "be a list", notes_obj)
    notes = []
    for i, n in enumerate(notes_obj):
        where = f"{path}.notes[{i}]"
        if not isinstance(n, dict):
            raise _fail(where, "be an object {text, created_at}", n)
        notes.append((_get(n, "text", str, where, "be text"), _get(n, "created_at", str, where, "be an ISO 8601 time")))
    models_obj = obj.get("models", [])
    if not isinstance(models_obj, list):
        raise _fail(f"{path}.models", "be a list", models_obj)
    models = []
    for i, m in enumerate(models_obj):
        where = f"{path}.models[{i}]"
        if not isinstance(m, dict):
            raise _fail(where, "be an object", m)
        kind = _checked(validate_kind, _get(m, "kind", str, where, "be a model kind"), f"{where}.kind", "be a model kind")
        revision = _get(m, "revision", int, where, "be a whole number >= 1")
        if revision < 1:
            raise _fail(f"{where}.revision", "be a whole number >= 1", revision)
        models.append(
            BundleModel(
                kind=kind,
                revision=revision,
                created_at=_get(m, "created_at", str, where, "be an ISO 8601 time"),
                meta=_parse_meta(m.get("meta", {}), f"{where}.meta"),
                files=_parse_files(m.get("files"), f"{where}.files", blobs),
            )
        )
    return BundleVersion(
        ref=ref,
        name=name,
        number=number,
        parent=parent,
        reason=reason,
        created_at=created_at,
        meta=_parse_meta(obj.get("meta", {}), f"{path}.meta"),
        files=_parse_files(obj.get("files"), f"{path}.files", blobs),
        notes=tuple(notes),
        models=tuple(models),
    )


def parse_manifest(data: bytes) -> Manifest:
    """Parse and check manifest bytes; every problem is a BundleError naming the field."""
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
        raise _fail("the top level", "be a JSON object", type(doc).__name__)
    if doc.get("format") != BUNDLE_FORMAT:
        raise _fail("format", f"be {BUNDLE_FORMAT!r}", doc.get("format"))
    fv = doc.get("format_version")
    if fv != BUNDLE_FORMAT_VERSION:
        raise _fail("format_version", f"be {BUNDLE_FORMAT_VERSION} (upgrade kinetome for newer bundles)", fv)
    blobs_obj = doc.get("blobs")
    if not isinstance(blobs_obj, dict):
        raise _fail("blobs", "be an object of sha256 -> size", blobs_obj)
    blobs: dict[str, int] = {}
    for digest, size in blobs_obj.items():
        if not is_digest(digest):
            raise _fail("blobs key", "be 64 lowercase hex characters", digest)
        if not isinstance(size, int) or isinstance(size, bool) or size < 0:
            raise _fail(f"blobs[{digest!r}]", "be a whole number of bytes >= 0", size)
        blobs[digest] = size
    versions_obj = doc.get("versions")
    if not isinstance(versions_obj, list) or not versions_obj:
        raise _fail("versions", "be a non-empty list", versions_obj)
    versions = [_parse_version(v, f"versions[{i}]", blobs) for i, v in enumerate(versions_obj)]
    seen: set[str] = set()
    for i, v in enumerate(versions):
        if v.ref in seen:
            raise _fail(f"versions[{i}].ref", "be unique in the bundle", v.ref)
        seen.add(v.ref)
    refs = [v.ref for v in versions]
    for i, v in enumerate(versions):
        if v.parent is not None and v.parent in refs and refs.index(v.parent) >= i:
            raise _fail(f"versions[{i}].parent", "come earlier in the list (parents first)", v.parent)
        kinds = [(m.kind, m.revision) for m in v.models]
        if len(set(kinds)) != len(kinds):
            raise _fail(f"versions[{i}].models", "hold each (kind, revision) once", kinds)
    used = {e.digest for v in versions for e in v.files} | {e.digest for v in versions for m in v.models for e in m.files}
    unused = sorted(set(blobs) - used)
    if unused:
        raise _fail(f"blobs[{unused[0]!r}]", "be used by a version or model file", "unused")
    root = doc.get("root")
    if root not in refs:
        raise _fail("root", "be the ref of one of the versions", root)
    return Manifest(root=root, versions=tuple(versions), blobs=blobs)


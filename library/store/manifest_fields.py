"""Checks for the fields of an untrusted bundle manifest: every problem is a BundleError naming the field."""

from __future__ import annotations

import json
from typing import Any

from kinetome.library.errors import BundleError, InvalidInputError
from kinetome.library.store.metadata import canonical_meta
from kinetome.library.store.names import parse_ref, validate_role
from kinetome.library.store.records import FileEntry, is_digest

__all__ = [
    "MANIFEST_NAME",
    "fail",
    "get",
    "checked",
    "parse_blobs",
    "parse_files",
    "parse_meta",
    "parse_notes",
    "parse_version_ref",
    "parse_optional_ref",
    "parse_identity",
]

MANIFEST_NAME = "manifest.json"


def fail(path: str, rule: str, got: object) -> BundleError:
    return BundleError(f"member {MANIFEST_NAME!r}: {path} must {rule}, got {got!r:.120}; re-export the bundle")


def get(obj: dict, key: str, kind: type | tuple[type, ...], path: str, rule: str) -> Any:
    if key not in obj:
        raise BundleError(f"member {MANIFEST_NAME!r}: {path}.{key} is missing; re-export the bundle")
    value = obj[key]
    if not isinstance(value, kind) or (kind is int and isinstance(value, bool)):
        raise fail(f"{path}.{key}", rule, value)
    return value


def checked(fn, value, path: str, rule: str):
    try:
        return fn(value)
    except InvalidInputError:
        raise fail(path, rule, value) from None


def parse_blobs(obj: object) -> dict[str, int]:
    if not isinstance(obj, dict):
        raise fail("blobs", "be an object of sha256 -> size", obj)
    blobs: dict[str, int] = {}
    for digest, size in obj.items():
        if not is_digest(digest):
            raise fail("blobs key", "be 64 lowercase hex characters", digest)
        if not isinstance(size, int) or isinstance(size, bool) or size < 0:
            raise fail(f"blobs[{digest!r}]", "be a whole number of bytes >= 0", size)
        blobs[digest] = size
    return blobs


def parse_files(obj: object, path: str, blobs: dict[str, int]) -> tuple[FileEntry, ...]:
    if not isinstance(obj, dict) or not obj:
        raise fail(path, "be a non-empty object of role -> {digest, size}", obj)
    out = []
    for role, spec in sorted(obj.items()):
        checked(validate_role, role, f"{path} key", "be a valid file role")
        where = f"{path}[{role!r}]"
        if not isinstance(spec, dict):
            raise fail(where, "be an object {digest, size}", spec)
        digest = get(spec, "digest", str, where, "be a sha256 hex digest")
        size = get(spec, "size", int, where, "be a whole number of bytes")
        if not is_digest(digest):
            raise fail(f"{where}.digest", "be 64 lowercase hex characters", digest)
        if digest not in blobs:
            raise fail(f"{where}.digest", "be listed in blobs", digest)
        if blobs[digest] != size:
            raise fail(f"{where}.size", f"equal the size listed in blobs ({blobs[digest]})", size)
        out.append(FileEntry(role, digest, size))
    return tuple(out)


def parse_meta(obj: object, path: str) -> dict[str, Any]:
    try:
        return json.loads(canonical_meta(obj, what=path))
    except InvalidInputError as e:
        raise BundleError(f"member {MANIFEST_NAME!r}: {e}; re-export the bundle") from None


def parse_notes(obj: object, path: str) -> tuple[tuple[str, str], ...]:
    if not isinstance(obj, list):
        raise fail(path, "be a list", obj)
    notes = []
    for i, n in enumerate(obj):
        where = f"{path}[{i}]"
        if not isinstance(n, dict):
            raise fail(where, "be an object {text, created_at}", n)
        notes.append((get(n, "text", str, where, "be text"), get(n, "created_at", str, where, "be an ISO 8601 time")))
    return tuple(notes)


def parse_version_ref(obj: dict, key: str, path: str) -> tuple[str, str, int]:
    """(ref, name, number) of a required ``name@N`` field."""
    ref = get(obj, key, str, path, "be a ref name@N")
    name, number = checked(parse_ref, ref, f"{path}.{key}", "be a ref name@N")
    if number is None:
        raise fail(f"{path}.{key}", "be a ref name@N with a number", ref)
    return ref, name, number


def parse_optional_ref(obj: dict, key: str, path: str) -> str | None:
    value = obj.get(key)
    if value is not None:
        if not isinstance(value, str) or checked(parse_ref, value, f"{path}.{key}", "be null or a ref name@N")[1] is None:
            raise fail(f"{path}.{key}", "be null or a ref name@N", value)
    return value


def parse_identity(value: object, path: str, *, optional: bool = False) -> str | None:
    if value is None and optional:
        return None
    if not is_digest(value):
        raise fail(path, "be a content identity (64 lowercase hex characters)" + (" or null" if optional else ""), value)
    return value  # type: ignore[return-value]

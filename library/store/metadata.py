"""Canonical JSON for version and model metadata: strict, sorted, finite numbers only."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping

from kinetome.library.errors import InvalidInputError

__all__ = ["canonical_meta", "canonical_json"]


def _find_bad(value: object, path: str) -> str | None:
    """Describe the first value under ``path`` that strict JSON cannot hold, or None."""
    if value is None or isinstance(value, (bool, str)):
        return None
    if isinstance(value, int):
        return None
    if isinstance(value, float):
        return None if math.isfinite(value) else f"{path} is {value!r}; store non-finite numbers as null or a string"
    if isinstance(value, (list, tuple)):
        for i, item in enumerate(value):
            bad = _find_bad(item, f"{path}[{i}]")
            if bad:
                return bad
        return None
    if isinstance(value, Mapping):
        for key, item in value.items():
            if not isinstance(key, str):
                return f"{path} has a key {key!r} of type {type(key).__name__}; keys must be strings"
            bad = _find_bad(item, f"{path}[{key!r}]")
            if bad:
                return bad
        return None
    return (
        f"{path} is a {type(value).__name__}; use str, int, float, bool, None, lists or dicts "
        "(convert numpy values with .tolist() or float())"
    )


def canonical_json(value: object) -> str:
    """Sorted, compact JSON text of an already-checked value."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def canonical_meta(meta: object, *, what: str = "meta") -> str:
    """Check that ``meta`` is a JSON object and return its canonical text."""
    if meta is None:
        return "{}"
    if not isinstance(meta, Mapping):
        raise InvalidInputError(f"{what} must be a dict (a JSON object), got {type(meta).__name__}; pass meta={{...}}")
    bad = _find_bad(meta, what)
    if bad:
        raise InvalidInputError(f"{what} must hold only JSON values: {bad}")
    return canonical_json(dict(meta))

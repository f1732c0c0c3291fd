"""Rules for skill names, version refs (``name@N``), file roles and model kinds."""

from __future__ import annotations

import re

from kinetome.library.errors import InvalidInputError

__all__ = [
    "NAME_PATTERN",
    "ROLE_PATTERN",
    "validate_name",
    "validate_role",
    "validate_kind",
    "parse_ref",
    "format_ref",
]

NAME_PATTERN = r"[a-z0-9][a-z0-9_-]{0,63}"
ROLE_PATTERN = r"[A-Za-z0-9][A-Za-z0-9._-]{0,127}"

_NAME_RE = re.compile(NAME_PATTERN)
_ROLE_RE = re.compile(ROLE_PATTERN)
_NUMBER_RE = re.compile(r"[1-9][0-9]{0,17}")
_NAME_RULE = (
    f"match {NAME_PATTERN} (lowercase letters, digits, '_' or '-', "
    "starting with a letter or digit, at most 64 characters)"
)


def _suggest_name(text: str) -> str:
    """A valid name close to ``text``, for the fix part of an error."""
    cleaned = re.sub(r"[^a-z0-9_-]+", "-", text.strip().lower()).strip("-_")[:64].strip("-_")
    return cleaned if cleaned else "reacher-v1"


def validate_name(name: object, *, what: str = "skill name") -> str:
    """Return ``name`` if it is a valid skill name, else raise InvalidInputError."""
    if not isinstance(name, str):
        raise InvalidInputError(f"{what} must be a string, got {type(name).__name__} {name!r}")
    if _NAME_RE.fullmatch(name) is None:
        raise InvalidInputError(f"{what} must {_NAME_RULE}, got {name!r}; use e.g. {_suggest_name(name)!r}")
    return name


def validate_kind(kind: object) -> str:
    """Return ``kind`` if it is a valid option-model kind (same rule as skill names)."""
    return validate_name(kind, what="model kind")


def validate_role(role: object) -> str:
    """Return ``role`` if it is a valid file role such as ``params.safetensors``."""
    if not isinstance(role, str) or _ROLE_RE.fullmatch(role) is None or role in {".", ".."}:
        raise InvalidInputError(
            f"file role must match {ROLE_PATTERN} (letters, digits, '.', '_' or '-', no '/', "
            f"at most 128 characters), got {role!r}; use e.g. 'params.safetensors'"
        )
    return role


def parse_ref(ref: object) -> tuple[str, int | None]:
    """Split ``"name@3"`` into ``("name", 3)`` and ``"name"`` into ``("name", None)`` (latest)."""
    if not isinstance(ref, str):
        raise InvalidInputError(f"version ref must be a string NAME or NAME@N, got {type(ref).__name__} {ref!r}")
    name, sep, number = ref.partition("@")
    validate_name(name, what=f"skill name in ref {ref!r}")
    if not sep:
        return name, None
    if _NUMBER_RE.fullmatch(number) is None:
        raise InvalidInputError(
            f"version number in ref {ref!r} must be a whole number >= 1 without leading zeros, "
            f"got {number!r}; write NAME for the latest version or NAME@N, e.g. '{name}@1'"
        )
    return name, int(number)


def format_ref(name: str, number: int) -> str:
    """The canonical ``name@N`` text of a version."""
    return f"{name}@{number}"

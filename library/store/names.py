"""Rules for skill names, version refs (``name@N``), file roles and model kinds."""

from __future__ import annotations

import re
from dataclasses import dataclass

from kinetome.library.errors import InvalidInputError

__all__ = [
    "NAME_PATTERN",
    "ROLE_PATTERN",
    "TASK_PATTERN",
    "REF_PATTERN",
    "NOMINAL_TASK",
    "Pin",
    "validate_name",
    "validate_task",
    "parse_pin",
    "validate_role",
    "validate_kind",
    "parse_ref",
    "format_ref",
]

NAME_PATTERN = r"[a-z0-9][a-z0-9_-]{0,63}"
ROLE_PATTERN = r"[A-Za-z0-9][A-Za-z0-9._-]{0,127}"
# a task is named by its variant's name (the same rule as TaskVariant.name); "nominal" is the unchanged task
TASK_PATTERN = r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}"
NOMINAL_TASK = "nominal"
IDENTITY_PREFIX_MIN = 12
# NAME, NAME@N (local number) or NAME@id:HEX (content identity, 12 to 64 hex characters)
REF_PATTERN = NAME_PATTERN + r"(@([1-9][0-9]{0,17}|id:[0-9a-f]{12,64}))?"

_NAME_RE = re.compile(NAME_PATTERN)
_ROLE_RE = re.compile(ROLE_PATTERN)
_TASK_RE = re.compile(TASK_PATTERN)
_NUMBER_RE = re.compile(r"[1-9][0-9]{0,17}")
_IDENTITY_RE = re.compile(r"[0-9a-f]{12,64}")
_NAME_RULE = (
    f"match {NAME_PATTERN} (lowercase letters, digits, '_' or '-', "
    "starting with a letter or digit, at most 64 characters)"
)


def _suggest_name(text: str) -> str:
    """A valid name close to ``text``, for the fix part of an error."""
    cleaned = re.sub(r"[^a-z0-9_-]+", "-", text.strip().lower()).strip("-_")[:64].strip("-_")
    return cleaned if cleaned else "arm-reach"


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


def validate_task(task: object) -> str:
    """Return ``task`` if it is a valid task name (a variant name such as ``heavy_payload``, or ``nominal``)."""
    if not isinstance(task, str) or _TASK_RE.fullmatch(task) is None:
        raise InvalidInputError(
            f"task must match {TASK_PATTERN} (a task variant's name, e.g. 'heavy_payload', or 'nominal'), got {task!r}"
        )
    return task


@dataclass(frozen=True)
class Pin:
    """A parsed reference: a bare name (the current version), ``name@N``, or ``name@id:HEX``."""

    name: str
    number: int | None = None
    identity: str | None = None  # a hex prefix of the content identity

    @property
    def pinned(self) -> bool:
        return self.number is not None or self.identity is not None


def parse_pin(ref: object) -> Pin:
    """Parse ``name``, ``name@3`` or ``name@id:3f2a9c41d0e2`` (identity prefixes of 12 to 64 hex characters)."""
    if isinstance(ref, str) and "@id:" in ref:
        name, _, prefix = ref.partition("@id:")
        validate_name(name, what=f"skill name in ref {ref!r}")
        if _IDENTITY_RE.fullmatch(prefix) is None:
            raise InvalidInputError(
                f"identity prefix in ref {ref!r} must be {IDENTITY_PREFIX_MIN} to 64 lowercase hex characters, "
                f"got {prefix!r}; copy the identity `kinetome show {name}` prints"
            )
        return Pin(name, identity=prefix)
    name, number = parse_ref(ref)
    return Pin(name, number=number)


def format_ref(name: str, number: int) -> str:
    """The canonical ``name@N`` text of a version."""
    return f"{name}@{number}"

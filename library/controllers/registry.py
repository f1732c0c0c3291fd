"""The table of controller kinds: ``@register_kind`` fills it, ``kind_class`` reads it."""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any, Callable, TypeVar

from .errors import ControllerError, close_match_hint, problem

if TYPE_CHECKING:
    from .base import Controller
    from .kind import ControllerKind

__all__ = ["register_kind", "declares_kind", "controller_kinds", "kind_class", "kind_declaration"]

_KINDS: dict[str, type] = {}  # kind -> torch Controller class
_DECLARED: dict[str, type] = {}  # kind -> torch-free ControllerKind class
# Built-in kinds load on first use: the declaration from .kinds.<module> (no torch),
# the implementation from .<module> (torch).
_BUILTIN = {"joint_pd": "joint_pd", "task_pd": "task_pd", "linear": "linear", "mlp": "mlp", "cpg": "cpg"}
C = TypeVar("C", bound=type)


def register_kind(kind: str) -> Callable[[C], C]:
    """Class decorator: make a ``Controller`` subclass buildable as ``kind``."""
    if not kind.isidentifier():
        raise ValueError(f"controller kind must be an identifier, got {kind!r}")

    def wrap(cls: C) -> C:
        if kind in _KINDS and _KINDS[kind] is not cls:
            raise ValueError(f"controller kind {kind!r} is already registered by {_KINDS[kind].__name__}")
        cls.kind = kind
        _KINDS[kind] = cls
        return cls

    return wrap


def declares_kind(kind: str) -> Callable[[C], C]:
    """Class decorator: the torch-free declaration (``ControllerKind``) of ``kind``."""

    def wrap(cls: C) -> C:
        cls.kind = kind
        _DECLARED[kind] = cls
        return cls

    return wrap


def controller_kinds() -> list[str]:
    """Every registered kind, sorted."""
    return sorted({*_KINDS, *_DECLARED, *_BUILTIN})


def kind_class(kind: str, *, where: str = "controller") -> "type[Controller]":
    """The class registered as ``kind``; an unknown kind names the close match and the known kinds."""
    return _lookup(_KINDS, kind, "", where)


def kind_declaration(kind: str, *, where: str = "controller") -> "type[ControllerKind]":
    """What ``kind`` declares (settings, parameters, inputs), loaded without torch for built-in kinds."""
    if isinstance(kind, str) and kind in _KINDS:  # the torch class, when loaded, declares the same
        return _KINDS[kind]
    return _lookup(_DECLARED, kind, "kinds.", where)


def _lookup(table: dict[str, type], kind: Any, package: str, where: str) -> type:
    """``table[kind]``, importing the built-in module ``<package><module>`` first when needed."""
    if isinstance(kind, str) and kind not in table and kind in _BUILTIN:
        importlib.import_module(f"{__package__}.{package}{_BUILTIN[kind]}")
    try:
        return table[kind]
    except (KeyError, TypeError):
        raise _unknown(kind, where) from None


def _unknown(kind: Any, where: str) -> ControllerError:
    known = controller_kinds()
    return ControllerError([problem(
        f"{where}.kind",
        f"must name a known controller kind, got {kind!r}",
        f"{close_match_hint(kind, known)}known kinds: {', '.join(known)}",
    )])

"""The table of controller kinds: ``@register_kind`` fills it, ``kind_class`` reads it."""

from __future__ import annotations

from typing import TYPE_CHECKING, Callable, TypeVar

from .errors import ControllerError, close_match_hint, problem

if TYPE_CHECKING:
    from .base import Controller

__all__ = ["register_kind", "controller_kinds", "kind_class"]

_KINDS: dict[str, type] = {}
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


def controller_kinds() -> list[str]:
    """Every registered kind, sorted."""
    return sorted(_KINDS)


def kind_class(kind: str, *, where: str = "controller") -> "type[Controller]":
    """The class registered as ``kind``; an unknown kind names the close match and the known kinds."""
    try:
        return _KINDS[kind]
    except (KeyError, TypeError):
        raise ControllerError([problem(
            f"{where}.kind",
            f"must name a known controller kind, got {kind!r}",
            f"{close_match_hint(kind, _KINDS)}known kinds: {', '.join(controller_kinds())}",
        )]) from None

"""The table of checker methods; a method joins it with ``@checker_method(name)``.

A method is ``fn(ctx, checked) -> {handoff index: Evidence}``: it gets the
checked still undecided and returns evidence for those it could examine
(a handoff it cannot examine, e.g. no option models attached, is left out).
Methods run cheapest first, in the order of their ``cost``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

__all__ = ["MethodEntry", "checker_method", "methods", "method_names", "get_method", "AUTO"]

AUTO = "auto"

Method = Callable[[Any, list], dict]


@dataclass(frozen=True)
class MethodEntry:
    name: str
    fn: Method
    cost: int  # lower runs first in auto mode
    summary: str


_METHODS: dict[str, MethodEntry] = {}


def checker_method(name: str, *, cost: int, summary: str = "") -> Callable[[Method], Method]:
    """Register ``fn`` as checker method ``name`` (``cost`` orders the auto cascade)."""

    def wrap(fn: Method) -> Method:
        if name in _METHODS or name == AUTO:
            raise ValueError(f"checker method {name!r} is already registered")
        _METHODS[name] = MethodEntry(name, fn, cost, summary or (fn.__doc__ or "").strip().splitlines()[0])
        return fn

    return wrap


def _load_builtin() -> None:
    from . import model_method, sim_method, static_method  # noqa: F401  (registration)


def methods() -> list[MethodEntry]:
    """Every registered method, cheapest first."""
    _load_builtin()
    return sorted(_METHODS.values(), key=lambda m: (m.cost, m.name))


def method_names() -> list[str]:
    return [m.name for m in methods()]


def get_method(name: str) -> MethodEntry:
    _load_builtin()
    try:
        return _METHODS[name]
    except KeyError:
        import difflib

        known = [AUTO, *method_names()]
        close = difflib.get_close_matches(name, known, n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        from ..errors import InvalidInputError

        raise InvalidInputError(f"method must be one of {', '.join(known)}, got {name!r}; {hint}".rstrip("; ")) from None

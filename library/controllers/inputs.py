"""The ``inputs`` setting shared by the feedback kinds: which named quantities feed the policy."""

from __future__ import annotations

from typing import Any

from ..errors import Problem
from .context import ControllerContext
from .errors import close_match_hint, problem

__all__ = ["normalise_inputs", "input_size", "DEFAULT_INPUTS"]

DEFAULT_INPUTS = ("qpos", "qvel")


def normalise_inputs(context: ControllerContext, value: Any, field: str, problems: list[Problem]) -> tuple[str, ...]:
    """A non-empty tuple of distinct layout names; problems are appended, not raised."""
    known = context.layout.names
    if isinstance(value, str) or not isinstance(value, (list, tuple)) or not value:
        problems.append(problem(field, f"must be a non-empty list of named-state quantities, got {value!r}",
                                f"e.g. [qpos, qvel]; known: {', '.join(known)}"))
        return tuple(DEFAULT_INPUTS)
    names: list[str] = []
    for name in value:
        if not isinstance(name, str) or name not in context.layout:
            problems.append(problem(field, f"must name quantities of the state, got {name!r}",
                                    f"{close_match_hint(name, known)}known: {', '.join(known)}"))
        elif name in names:
            problems.append(problem(field, f"must not repeat a quantity, got {name!r} twice", "list each quantity once"))
        else:
            names.append(name)
    return tuple(names)


def input_size(context: ControllerContext, names: tuple[str, ...]) -> int:
    """Number of scalars in the flattened inputs."""
    return sum(context.layout[n].size for n in names)

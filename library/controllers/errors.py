"""The controller error: every problem with a kind, its settings, parameters or bounds at once."""

from __future__ import annotations

import difflib
from typing import Iterable

from ..errors import InvalidInputError, KinetomeError, Problem

__all__ = ["ControllerError", "problem", "close_match_hint"]

_SOURCE = "<controller>"


def problem(field: str, message: str, fix: str = "") -> Problem:
    """One controller problem; ``field`` is the dotted spec path, e.g. ``controller.parameters.kp``."""
    return Problem(_SOURCE, None, field, message, fix)


def _line(p: Problem) -> str:
    text = f"{p.field} {p.message}" if p.field else p.message
    return f"{text}; {p.fix}" if p.fix else text


class ControllerError(InvalidInputError, ValueError):
    """A controller kind, setting, parameter, bound or parameter file is wrong.

    ``problems`` keeps each problem's dotted field, message and fix so a spec
    loader can attach file and line; ``str`` gives one line per problem in the
    form ``controller.parameters.kp must have shape (3,), got (2,); give one value per actuator``.
    It is a ``ValueError`` too, so generic callers can catch it as one.
    """

    def __init__(self, problems: Iterable[Problem] | str):
        if isinstance(problems, str):
            problems = [problem("", problems)]
        self.problems = list(problems)
        KinetomeError.__init__(self, "\n".join(_line(p) for p in self.problems))

    def lines(self) -> list[str]:
        return [_line(p) for p in self.problems]


def close_match_hint(word: str, known: Iterable[str]) -> str:
    """``"did you mean 'kp'? "`` when a known name is close to ``word``, else ``""``."""
    close = difflib.get_close_matches(str(word), list(known), n=1)
    return f"did you mean {close[0]!r}? " if close else ""

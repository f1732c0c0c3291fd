"""PredicateError: a predicate text or tree is not valid, with where and how to fix it."""

from __future__ import annotations

from kinetome.library.errors import KinetomeError

__all__ = ["PredicateError"]

_SHOWN_TEXT = 100  # characters of the offending text quoted in a message


class PredicateError(ValueError, KinetomeError):
    """A predicate failed to parse or type-check.

    Attributes: ``reason`` (what is wrong), ``fix`` (how to fix it, may be empty),
    ``text`` (the whole predicate text), ``line`` / ``column`` (1-based, ``None``
    when the problem has no position, e.g. for a tree built in code) and ``what``
    (the field the text came from, such as ``"starts_when"``).
    """

    def __init__(
        self,
        reason: str,
        *,
        fix: str = "",
        text: str = "",
        line: int | None = None,
        column: int | None = None,
        what: str = "predicate",
    ):
        self.reason = reason
        self.fix = fix
        self.text = text
        self.line = line
        self.column = column
        self.what = what
        super().__init__(self._message())

    def _message(self) -> str:
        where = ""
        if self.column is not None:
            multiline = "\n" in self.text.rstrip()
            where = (
                f" at line {self.line}, column {self.column}"
                if multiline and self.line is not None
                else f" at column {self.column}"
            )
        message = f"{self.what}: {self.reason}{where}"
        if self.fix:
            message += f"; {self.fix}"
        if self.text:
            message += f" -- in {_excerpt(self.text, self.column)!r}"
        return message

    def pointer(self) -> str:
        """The offending line with a caret under the column (two lines of text)."""
        if self.column is None or not self.text:
            return self.text
        lines = self.text.split("\n")
        index = min(max((self.line or 1) - 1, 0), len(lines) - 1)
        return f"{lines[index]}\n{' ' * (self.column - 1)}^"


def _excerpt(text: str, column: int | None) -> str:
    """The text itself when short, else a window around the column."""
    flat = " ".join(text.split("\n"))
    if len(flat) <= _SHOWN_TEXT:
        return flat
    centre = (column or 1) - 1
    start = max(0, min(centre - _SHOWN_TEXT // 2, len(flat) - _SHOWN_TEXT))
    piece = flat[start : start + _SHOWN_TEXT]
    return ("..." if start > 0 else "") + piece + ("..." if start + _SHOWN_TEXT < len(flat) else "")

"""Terminal output: aligned tables, JSON, and one-line errors."""

from __future__ import annotations

import json
import sys
from typing import Any, Iterable, Sequence, TextIO

__all__ = ["format_table", "print_table", "print_json", "print_error"]


def _cell(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(value)


def format_table(rows: Iterable[dict[str, Any]], columns: Sequence[tuple[str, str]]) -> str:
    """Rows as a left-aligned table; columns are (key, header) pairs."""
    rows = list(rows)
    cells = [[header for _, header in columns]] + [[_cell(r.get(key)) for key, _ in columns] for r in rows]
    widths = [max(len(row[i]) for row in cells) for i in range(len(columns))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in cells]
    return "\n".join(lines)


def print_table(rows: Iterable[dict[str, Any]], columns: Sequence[tuple[str, str]], stream: TextIO | None = None) -> None:
    print(format_table(rows, columns), file=stream or sys.stdout)


def print_json(data: Any, stream: TextIO | None = None) -> None:
    json.dump(data, stream or sys.stdout, indent=2, sort_keys=True, default=_json_default)
    (stream or sys.stdout).write("\n")


def _json_default(value: Any) -> Any:
    import numpy as np

    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    raise TypeError(f"cannot write {type(value).__name__} as JSON")


def print_error(line: str) -> None:
    print(f"kinetome: {line}", file=sys.stderr)


"""Progress reporting: a callback per logged update, or one text line per update on a stream."""

from __future__ import annotations

import math
from typing import Any, Callable, TextIO

__all__ = ["ProgressFn", "as_progress", "format_row"]

# progress(row): row holds the curve columns of one update (see curves.CURVE_COLUMNS) plus "updates" and "total_steps"
ProgressFn = Callable[[dict[str, Any]], None]


def _num(v: Any, fmt: str) -> str:
    return "-" if v is None or (isinstance(v, float) and math.isnan(v)) else format(v, fmt)


def format_row(row: dict[str, Any]) -> str:
    """``update 3/10  steps 6144/20480  return -12.3  success 0.45  1,234 steps/s``."""
    return (
        f"update {row['update']}/{row.get('updates', '?')}  env steps {row['env_steps']}/{row.get('total_steps', '?')}  "
        f"return {_num(row.get('return_mean'), '.3g')}  success {_num(row.get('success_rate'), '.2f')}  "
        f"{_num(row.get('steps_per_s'), ',.0f')} steps/s"
    )


def as_progress(progress: ProgressFn | TextIO | None) -> ProgressFn | None:
    """A callable for a callable, a line printer for a stream (anything with ``write``), else None."""
    if progress is None:
        return None
    if hasattr(progress, "write"):
        stream = progress

        def emit(row: dict[str, Any]) -> None:
            stream.write(format_row(row) + "\n")
            flush = getattr(stream, "flush", None)
            if flush is not None:
                flush()

        return emit
    if callable(progress):
        return progress
    raise TypeError(f"progress must be a callable or a text stream, got {type(progress).__name__}")

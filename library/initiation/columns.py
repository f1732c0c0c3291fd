"""Candidate clause columns over named start states: one per varying component, one norm per vector quantity.

A proposal is a conjunction of bounds on these columns, so each column is also a
piece of predicate text: ``qpos[0]`` (bounded on both sides), ``torso_height``,
or ``norm(qvel)`` / ``norm(fingertip - [c0, c1, c2])`` (bounded above only: a ball
about a centre). Pure numpy; no MuJoCo, no store.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

__all__ = ["Column", "candidate_columns", "column_matrix", "number_text", "varying"]


def number_text(x: float) -> str:
    """A short decimal for predicate text that parses back to exactly ``x`` (``x`` is rounded first)."""
    text = repr(float(x))
    return text[:-2] if text.endswith(".0") else text


def varying(column: np.ndarray) -> bool:
    """True when the column takes more than one value (beyond rounding noise)."""
    spread = float(np.max(column) - np.min(column)) if column.size else 0.0
    return spread > 1e-9 * max(1.0, float(np.max(np.abs(column))) if column.size else 1.0)


@dataclass(frozen=True)
class Column:
    """One candidate clause column: a state component (two-sided) or a quantity's distance to a centre (upper only)."""

    quantity: str
    index: int | None  # component of a vector quantity; None for a scalar or a norm
    centre: tuple[float, ...] | None = None  # set for a norm column

    @property
    def is_norm(self) -> bool:
        return self.centre is not None

    @property
    def two_sided(self) -> bool:
        return not self.is_norm

    @property
    def text(self) -> str:
        if self.is_norm:
            if not any(self.centre):
                return f"norm({self.quantity})"
            return f"norm({self.quantity} - [{', '.join(number_text(c) for c in self.centre)}])"
        return self.quantity if self.index is None else f"{self.quantity}[{self.index}]"

    def values(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        """(n,) values of this column on batched named states."""
        v = np.asarray(states[self.quantity], dtype=np.float64)
        if self.is_norm:
            return np.linalg.norm(v.reshape(v.shape[0], -1) - np.asarray(self.centre), axis=1)
        return v.reshape(v.shape[0]) if self.index is None else v.reshape(v.shape[0], -1)[:, self.index]


def _centre(v: np.ndarray, success: np.ndarray, at_rest: bool) -> tuple[float, ...]:
    if at_rest or not np.any(success):
        return tuple(0.0 for _ in range(v.shape[1]))
    return tuple(float(np.round(c, 3)) + 0.0 for c in np.median(v[success], axis=0))


def candidate_columns(
    states: Mapping[str, np.ndarray],
    success: np.ndarray,
    *,
    quantities: Sequence[str] | None = None,
    at_rest: Sequence[str] = (),
) -> tuple[Column, ...]:
    """Columns of the components that vary in ``states`` (scalars and 1-D vectors), plus a norm per vector
    quantity with two or more varying components, centred at 0 for the ``at_rest`` quantities (velocities)
    and at the median of the successful starts otherwise (rounded to 1e-3)."""
    names = quantities if quantities is not None else [q for q, v in states.items() if np.ndim(v) <= 2]
    success = np.asarray(success, dtype=bool)
    out: list[Column] = []
    for q in names:
        v = np.asarray(states[q], dtype=np.float64)
        if v.ndim == 1:
            if varying(v):
                out.append(Column(q, None))
            continue
        moving = [i for i in range(v.shape[1]) if varying(v[:, i])]
        out.extend(Column(q, i) for i in moving)
        if len(moving) >= 2:
            out.append(Column(q, None, _centre(v, success, q in at_rest)))
    return tuple(out)


def column_matrix(columns: Sequence[Column], states: Mapping[str, np.ndarray]) -> np.ndarray:
    """(n, m) values of every column."""
    return np.stack([c.values(states) for c in columns], axis=1)

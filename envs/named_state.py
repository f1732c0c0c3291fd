"""Named state: a static layout of named quantities and their batched values.

Predicates and controllers read robot state only through these names, so a
skill spec can say ``norm(fingertip - target) < 0.02`` without knowing where
the numbers live in MuJoCo's arrays.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator, Mapping

import numpy as np

__all__ = ["Quantity", "StateLayout", "StateValues", "take_states"]

# Batched values: name -> array of shape (batch, *quantity.shape).
StateValues = Mapping[str, np.ndarray]


@dataclass(frozen=True)
class Quantity:
    """One named quantity: its shape per state, physical unit and meaning.

    ``low``/``high`` give the physical envelope where one is known (joint
    limits, actuator limits); the chain checker's static method uses them.
    ``derived`` marks quantities that are functions of qpos/qvel (such as a
    fingertip position): the static checker may relax them to free variables.
    """

    name: str
    shape: tuple[int, ...]
    unit: str
    meaning: str
    low: tuple[float, ...] | None = None
    high: tuple[float, ...] | None = None
    derived: bool = False

    def __post_init__(self) -> None:
        if not self.name.isidentifier():
            raise ValueError(f"quantity name must be an identifier, got {self.name!r}")
        if any((not isinstance(d, int)) or d < 1 for d in self.shape):
            raise ValueError(f"quantity {self.name}: shape must be positive ints, got {self.shape}")
        size = self.size
        for label, bound in (("low", self.low), ("high", self.high)):
            if bound is not None and len(bound) != size:
                raise ValueError(
                    f"quantity {self.name}: {label} must have {size} entries, got {len(bound)}"
                )

    @property
    def size(self) -> int:
        """Number of scalars in one value of this quantity."""
        return int(np.prod(self.shape, dtype=np.int64)) if self.shape else 1


@dataclass(frozen=True)
class StateLayout:
    """The ordered set of quantities an env exposes."""

    quantities: tuple[Quantity, ...]

    def __post_init__(self) -> None:
        names = [q.name for q in self.quantities]
        dupes = sorted({n for n in names if names.count(n) > 1})
        if dupes:
            raise ValueError(f"state layout has duplicate names: {', '.join(dupes)}")

    def __iter__(self) -> Iterator[Quantity]:
        return iter(self.quantities)

    def __contains__(self, name: object) -> bool:
        return any(q.name == name for q in self.quantities)

    def __getitem__(self, name: str) -> Quantity:
        for q in self.quantities:
            if q.name == name:
                return q
        raise KeyError(f"unknown state quantity {name!r}; known: {', '.join(self.names)}")

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(q.name for q in self.quantities)

    def shapes(self) -> dict[str, tuple[int, ...]]:
        """name -> per-state shape, the form the predicate parser takes."""
        return {q.name: q.shape for q in self.quantities}

    def describe(self) -> list[dict]:
        """Rows for tables and JSON: name, shape, unit, meaning."""
        return [
            {"name": q.name, "shape": list(q.shape), "unit": q.unit, "meaning": q.meaning}
            for q in self.quantities
        ]


def take_states(values: StateValues, index: np.ndarray) -> dict[str, np.ndarray]:
    """Select rows (a boolean mask or integer index) from a batched state dict."""
    return {name: np.asarray(v)[index] for name, v in values.items()}

"""Named state: a static layout of named quantities and their batched values.

Predicates and controllers read robot state only through these names, so a
skill spec can say ``norm(fingertip - target) < 0.02`` without knowing where
the numbers live in MuJoCo's arrays.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator, Mapping

import numpy as np

__all__ = [
    "Quantity",
    "StateLayout",
    "StateValues",
    "take_states",
    "CONVENTIONS",
    "FOOT_FORCE_MEANING",
    "FOOT_CONTACT_MEANING",
    "foot_contact_magnitude",
    "convention_problems",
]

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


FOOT_FORCE_MEANING = "net contact force on each foot from what it touches, world axes"
FOOT_CONTACT_MEANING = "magnitude of the net contact force on each foot; 0 when the foot touches nothing"

# One named quantity means one thing on every env: name -> (unit, meaning). A
# quantity's meaning starts with this text and may add env detail after it (which
# joint, axis or body); unit None lets the unit follow the env's coordinates.
CONVENTIONS: dict[str, tuple[str | None, str]] = {
    "qpos": (None, "generalised positions"),
    "qvel": (None, "generalised velocities"),
    "torque": (None, "actuator controls as applied, clipped to the ctrl range"),
    "fingertip": ("m", "fingertip position, world frame"),
    "fingertip_vel": ("m/s", "fingertip velocity, world frame"),
    "target": ("m", "target position, world frame"),
    "torso_height": ("m", "height of the torso above the floor"),
    "torso_pitch": ("rad", "torso pitch angle"),
    "torso_vel": ("m/s", "torso velocity"),
    "foot_force": ("N", FOOT_FORCE_MEANING),
    "foot_contact": ("N", FOOT_CONTACT_MEANING),
}


def foot_contact_magnitude(values: Mapping[str, np.ndarray]) -> np.ndarray:
    """``foot_contact`` from ``foot_force``: (B, feet, 3) -> (B, feet) N."""
    return np.linalg.norm(values["foot_force"], axis=-1)


def convention_problems(layout: StateLayout) -> list[str]:
    """Quantities of ``layout`` whose unit or meaning departs from ``CONVENTIONS`` (empty: none)."""
    out = []
    for name in layout.names:
        if name not in CONVENTIONS:
            continue
        unit, meaning = CONVENTIONS[name]
        q = layout[name]
        if unit is not None and q.unit != unit:
            out.append(f"{name}: unit must be {unit!r}, got {q.unit!r}")
        if not q.meaning.startswith(meaning):
            out.append(f"{name}: meaning must start with {meaning!r}, got {q.meaning!r}")
    return out

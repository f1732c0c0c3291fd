"""Skill specs as frozen, validated value objects (no YAML, SQL or I/O here).

A spec describes a skill: the controller kind and its parameters, where it
may start (``starts_when``), when it stops (``stops_when`` or ``max_steps``)
and optional physical limits. ``spec_load`` reads and validates YAML files;
this module only holds the values and their canonical document form.
"""

from __future__ import annotations

import json
import math
import re
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .renamed_keys import SPEC_RENAMES, rename_keys

__all__ = [
    "NAME_PATTERN",
    "Limits",
    "ControllerSpec",
    "Skill",
    "skill_to_document",
    "skill_from_document",
    "controller_from_document",
    "canonical_json",
]

NAME_PATTERN = re.compile(r"^[a-z0-9][a-z0-9_-]{0,63}$")

Nested = float | tuple["Nested", ...]


def _freeze(value: Any) -> Nested:
    """Nested lists/arrays of numbers -> nested tuples of floats (immutable)."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
    if isinstance(value, (list, tuple)):
        return tuple(_freeze(v) for v in value)
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise TypeError(f"expected a number or a list of numbers, got {type(value).__name__}")
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"numbers must be finite, got {number}")
    return number


def _thaw(value: Nested) -> Any:
    return [_thaw(v) for v in value] if isinstance(value, tuple) else value


@dataclass(frozen=True)
class Limits:
    """Declared physical limits a skill promises to respect (checked by lint and checker)."""

    joint_speed: float | None = None  # rad/s, any joint
    end_effector_speed: float | None = None  # m/s, the fingertip
    torque: float | None = None  # N m, any actuator

    def __post_init__(self) -> None:
        for name in ("joint_speed", "end_effector_speed", "torque"):
            value = getattr(self, name)
            if value is not None and not (math.isfinite(value) and value > 0):
                raise ValueError(f"limits.{name} must be a positive number, got {value}")

    def as_dict(self) -> dict[str, float]:
        return {k: v for k, v in (("joint_speed", self.joint_speed), ("end_effector_speed", self.end_effector_speed), ("torque", self.torque)) if v is not None}


@dataclass(frozen=True)
class ControllerSpec:
    """Controller kind plus initial parameters, their bounds and kind settings."""

    kind: str
    parameters: Mapping[str, Nested] = field(default_factory=dict)
    bounds: Mapping[str, tuple[Nested, Nested]] = field(default_factory=dict)
    settings: Mapping[str, Any] = field(default_factory=dict)
    exploration_std: Nested = 0.1

    def __post_init__(self) -> None:
        if not self.kind:
            raise ValueError("controller.kind must be a non-empty string")
        object.__setattr__(self, "parameters", {k: _freeze(v) for k, v in dict(self.parameters).items()})
        object.__setattr__(
            self, "bounds", {k: (_freeze(lo), _freeze(hi)) for k, (lo, hi) in dict(self.bounds).items()}
        )
        # settings must be JSON data so they can be stored and compared
        object.__setattr__(self, "settings", json.loads(json.dumps(dict(self.settings))))
        object.__setattr__(self, "exploration_std", _freeze(self.exploration_std))

    def parameter_arrays(self) -> dict[str, np.ndarray]:
        return {k: np.asarray(_thaw(v), dtype=np.float64) for k, v in self.parameters.items()}

    def build_arguments(self) -> dict[str, Any]:
        """Keyword arguments of ``plan_controller`` / ``build_controller`` for this spec."""
        return {
            "parameters": self.parameter_arrays(),
            "bounds": self.bound_arrays(),
            "settings": dict(self.settings),
            "exploration_std": self.exploration_std,
        }

    def bound_arrays(self) -> dict[str, tuple[np.ndarray, np.ndarray]]:
        return {
            k: (np.asarray(_thaw(lo), dtype=np.float64), np.asarray(_thaw(hi), dtype=np.float64))
            for k, (lo, hi) in self.bounds.items()
        }


@dataclass(frozen=True)
class Skill:
    """A skill spec: a controller packaged as an option."""

    name: str
    env: str
    controller: ControllerSpec
    starts_when: str
    stops_when: str
    max_steps: int
    description: str = ""
    limits: Limits | None = None
    tags: tuple[str, ...] = ()
    initial_states: Any = None  # the usual initial states: a start-distribution mapping (kept as canonical JSON), or None

    def __post_init__(self) -> None:
        if not NAME_PATTERN.match(self.name):
            raise ValueError(
                f"name must be lowercase letters, digits, '-' or '_' (at most 64), got {self.name!r}"
            )
        if not isinstance(self.max_steps, int) or self.max_steps < 1:
            raise ValueError(f"max_steps must be a positive integer, got {self.max_steps!r}")
        for label in ("starts_when", "stops_when"):
            if not getattr(self, label).strip():
                raise ValueError(f"{label} must be a non-empty predicate")
        object.__setattr__(self, "tags", tuple(self.tags))
        if self.initial_states is not None:
            if isinstance(self.initial_states, str):  # already canonical JSON (dataclasses.replace)
                try:
                    parsed = json.loads(self.initial_states)
                except json.JSONDecodeError:
                    parsed = None
                if not isinstance(parsed, dict):
                    raise ValueError(f"initial_states must be a mapping (a start distribution), got the text {self.initial_states!r}")
                return
            if not isinstance(self.initial_states, Mapping):
                raise ValueError(f"initial_states must be a mapping (a start distribution), got {type(self.initial_states).__name__}")
            frozen = json.dumps(self.initial_states, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
            object.__setattr__(self, "initial_states", frozen)

    def initial_states_mapping(self) -> dict[str, Any] | None:
        """The usual initial states as plain data (a start distribution mapping), or None."""
        return None if self.initial_states is None else json.loads(self.initial_states)


def skill_to_document(skill: Skill) -> dict[str, Any]:
    """The canonical JSON-ready form: the content that is hashed and stored."""
    c = skill.controller
    doc: dict[str, Any] = {
        "name": skill.name,
        "description": skill.description,
        "env": skill.env,
        "controller": {
            "kind": c.kind,
            "parameters": {k: _thaw(v) for k, v in sorted(c.parameters.items())},
            "bounds": {k: {"low": _thaw(lo), "high": _thaw(hi)} for k, (lo, hi) in sorted(c.bounds.items())},
            "settings": dict(c.settings),
            "exploration_std": _thaw(c.exploration_std),
        },
        "starts_when": skill.starts_when,
        "stops_when": skill.stops_when,
        "max_steps": skill.max_steps,
        "tags": list(skill.tags),
    }
    if skill.limits is not None:
        doc["limits"] = skill.limits.as_dict()
    if skill.initial_states is not None:  # omitted when absent: older versions keep their content
        doc["initial_states"] = skill.initial_states_mapping()
    return doc


def controller_from_document(c: Mapping[str, Any]) -> ControllerSpec:
    """A ControllerSpec from the ``controller`` mapping of a spec document."""
    return ControllerSpec(
        kind=c["kind"],
        parameters=c.get("parameters", {}),
        bounds={k: (v["low"], v["high"]) for k, v in c.get("bounds", {}).items()},
        settings=c.get("settings", {}),
        exploration_std=c.get("exploration_std", 0.1),
    )


def skill_from_document(doc: Mapping[str, Any]) -> Skill:
    """Inverse of skill_to_document; raises TypeError/ValueError on bad values.

    Stored documents written before a rename (``controller.options``) are read
    under today's names, silently: a stored version cannot be edited.
    """
    doc, _ = rename_keys(dict(doc), SPEC_RENAMES, source="stored spec", warn=False)
    controller = controller_from_document(doc["controller"])
    limits = Limits(**doc["limits"]) if doc.get("limits") else None
    return Skill(
        name=doc["name"],
        env=doc["env"],
        controller=controller,
        starts_when=doc["starts_when"],
        stops_when=doc["stops_when"],
        max_steps=int(doc["max_steps"]),
        description=doc.get("description", ""),
        limits=limits,
        tags=tuple(doc.get("tags", ())),
        initial_states=doc.get("initial_states"),
    )


def canonical_json(doc: Any) -> bytes:
    """Deterministic JSON bytes (sorted keys, no spaces) for hashing and storage."""
    return json.dumps(doc, sort_keys=True, separators=(",", ":"), ensure_ascii=False).encode("utf-8")

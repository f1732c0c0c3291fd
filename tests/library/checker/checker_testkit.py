"""Shared helpers for the checker tests: spec and chain files written to a temp folder, stand-in skills."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

REPO = Path(__file__).resolve().parents[3]
CONFIGS = REPO / "configs"
ARM = "kinetome/BenchArm-v0"
WALKER = "kinetome/TestWalker-v0"

_ARM_CONTROLLER = """controller:
  kind: joint_pd
  parameters:
    setpoint: [1.4436, -1.5135, -1.3895]
    kp: [30.0, 20.0, 6.0]
    kd: [4.0, 2.5, 0.4]
"""


def write_arm_spec(folder: Path, name: str, *, starts_when: str, stops_when: str, max_steps: int = 100, limits: str = "") -> Path:
    """A joint-PD arm skill holding the tray pose, with the given predicates."""
    text = (
        f"name: {name}\nenv: {ARM}\n{_ARM_CONTROLLER}"
        f"starts_when: {starts_when!r}\nstops_when: {stops_when!r}\nmax_steps: {max_steps}\n"
    )
    if limits:
        text += f"limits: {limits}\n"
    path = folder / f"{name}.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def write_chain(folder: Path, name: str, skills: list[Any], *, env: str = ARM, start: Any = None, variant: str | None = None,
                require: float | None = None, require_chain: float | None = None, **fields: Any) -> Path:
    """A chain file; ``skills`` items are refs, spec paths or ``{"skill": ..., "may_time_out": True}``;
    other ``fields`` are written as YAML values (strings quoted)."""
    import yaml

    task: dict[str, Any] = {"env": env}
    if variant is not None:
        task["variant"] = str(variant)
    if start is not None:
        task["initial_states"] = start if isinstance(start, dict) else str(start)
    data: dict[str, Any] = {"name": name, "task": task, "skills": [s if isinstance(s, dict) else str(s) for s in skills]}
    req = {k: v for k, v in (("handoff", require), ("chain", require_chain)) if v is not None}
    if req:
        data["require"] = req
    data.update(fields)
    path = folder / f"{name}.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


@dataclass(frozen=True)
class Limits:
    joint_speed: float | None = None
    end_effector_speed: float | None = None
    torque: float | None = None


@dataclass(frozen=True)
class SpecStub:
    limits: Limits | None = None


@dataclass(frozen=True, eq=False)
class StubSkill:
    """What the static method reads of a LoadedSkill: ref, predicates, parameters, limits, max_steps."""

    ref: str
    starts_when: Any
    stops_when: Any
    parameters: dict[str, np.ndarray] = field(default_factory=dict)
    skill: SpecStub = SpecStub()
    max_steps: int = 100


def stub_skill(rig: Any, ref: str, *, starts_when: str = "norm(qvel) < 100", stops_when: str = "norm(qvel) < 100",
               parameters: dict[str, Any] | None = None, limits: Limits | None = None) -> StubSkill:
    from kinetome.library.predicates import parse_predicate

    params = {k: np.asarray(v, dtype=np.float64) for k, v in (parameters or {}).items()}
    names = {**{k: v.shape for k, v in params.items()}, **rig.layout.shapes()}
    return StubSkill(
        ref,
        parse_predicate(starts_when, names, what="starts_when"),
        parse_predicate(stops_when, names, what="stops_when"),
        params,
        SpecStub(limits),
    )


def stub_context(rig: Any, skills: list[StubSkill], *, start: Any = None, max_counterexamples: int = 5) -> Any:
    """A CheckContext over stand-in skills (no controllers: for the static method only)."""
    from kinetome.library.checker import Chain, CheckContext, CheckOptions

    chain = Chain(name="stub", env=rig.env_id, skills=tuple(s.ref for s in skills))
    options = CheckOptions(method="static", max_counterexamples=max_counterexamples, timeout_ms=20_000)
    return CheckContext(chain, options, rig, tuple(skills), tuple(rig.env_id for _ in skills), start)

"""A skill ready to execute: spec, built controller and parsed predicates."""

from __future__ import annotations

import json
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..spec import Skill, skill_from_document
from .files import LEARNED_STOP_FILE, NORMALISER_FILE, PARAMS_FILE, SPEC_FILE, STOP_HEADS_FILE

__all__ = ["LoadedSkill", "skill_from_spec", "load_skill", "with_learned_stop", "SPEC_FILE", "PARAMS_FILE"]



@dataclass(frozen=True, eq=False)
class LoadedSkill:
    """Everything the runtime needs to run one skill version as an option."""

    ref: str
    skill: Skill
    controller: Any  # library.controllers.Controller
    starts_when: Any  # library.predicates.Predicate
    stops_when: Any
    max_steps: int
    parameters: dict[str, np.ndarray]
    learned_stop: Any = None  # runtime.learned.LearnedStop: a stop head trained in settings mode, run as trained
    files: Any = None  # role -> bytes the version was loaded from (None: built from a spec in memory)

    @property
    def name(self) -> str:
        return self.skill.name

    def predicate_values(self) -> dict[str, np.ndarray]:
        """Parameter values predicates may name (no batch axis: they broadcast)."""
        return self.parameters


def skill_from_spec(skill: Skill, *, ref: str | None = None, rig: Any = None, parameter_values: dict[str, np.ndarray] | None = None) -> LoadedSkill:
    """Build controller and predicates for a validated spec.

    ``parameter_values`` (e.g. read from a stored version's safetensors) replace
    the spec's initial values; ``rig`` defaults to the spec's own env.
    """
    from ..controllers import build_controller, context_from_rig
    from ..predicates import parse_predicate
    from ..tasks import default_rig

    rig = rig if rig is not None else default_rig(skill.env)
    c = skill.controller
    controller = build_controller(c.kind, context_from_rig(rig), **c.build_arguments())
    if parameter_values is not None:
        controller.load_values(parameter_values)
    params = {k: np.asarray(v, dtype=np.float64) for k, v in controller.parameter_values().items()}
    names = {**{k: v.shape for k, v in params.items()}, **rig.layout.shapes()}
    return LoadedSkill(
        ref=ref or skill.name,
        skill=skill,
        controller=controller,
        starts_when=parse_predicate(skill.starts_when, names, what="starts_when"),
        stops_when=parse_predicate(skill.stops_when, names, what="stops_when"),
        max_steps=skill.max_steps,
        parameters=params,
    )


def load_skill(store: Any, ref: str, *, rig: Any = None) -> LoadedSkill:
    """Load a stored version ``name@N`` / ``name@id:HEX``; a bare ``name`` resolves to its
    current version for the rig's task variant (else for nominal)."""
    from ..controllers import load_parameters

    variant = getattr(rig, "variant", None)
    version = store.get(ref, task=getattr(variant, "name", None))
    doc = json.loads(store.read_file(version, SPEC_FILE).decode("utf-8"))
    values = load_parameters(store.read_file(version, PARAMS_FILE))
    loaded = skill_from_spec(skill_from_document(doc), ref=version.ref, rig=rig, parameter_values=values)
    files = {SPEC_FILE: store.read_file(version, SPEC_FILE), PARAMS_FILE: store.read_file(version, PARAMS_FILE)}
    if LEARNED_STOP_FILE not in version.roles:
        return replace(loaded, files=files)
    stop_files = {role: store.read_file(version, role) for role in (LEARNED_STOP_FILE, STOP_HEADS_FILE, NORMALISER_FILE)}
    return with_learned_stop(replace(loaded, files={**files, **stop_files}), stop_files)


def with_learned_stop(loaded: LoadedSkill, stop_files: dict[str, bytes]) -> LoadedSkill:
    """``loaded`` running the learned stop stored in ``stop_files`` (learned_stop.json, stop heads, normaliser)."""
    from .learned import LearnedStop

    stop = LearnedStop.from_files(*(stop_files[role] for role in (LEARNED_STOP_FILE, STOP_HEADS_FILE, NORMALISER_FILE)))
    return replace(loaded, learned_stop=stop)

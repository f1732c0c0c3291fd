"""Build the search problem from a store: the task's rig, candidate skills, start particles, goal, pair facts.

Candidate skills are the versions current for the task (its variant, else nominal) of
every stored skill of the task's robot, or the refs the caller lists (``name@N`` pins
a version). Pair facts come from z3 over each skill's stop region, the physical
envelope (the checker's premises) and the next skill's initiation set (or the goal),
and from check results stored on this task that say a handoff breaks.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..errors import InvalidInputError, Problem
from .links import FactCache, SolverMemo, bounds_fact, solver_fact
from .search import BROKEN, OPEN, LinkFact, PlanProblem
from .skill_steps import LibrarySkill

__all__ = ["PlanTask", "LibraryProblem", "build_problem", "parse_goal", "CHECK_RESULT_KIND"]

CHECK_RESULT_KIND = "check-result"


@dataclass(frozen=True)
class PlanTask:
    """Where the chain must run and what it must reach (paths absolute; initial states a file, a mapping or None)."""

    env: str
    goal: str
    variant: Path | None = None
    initial_states: Path | Mapping[str, Any] | None = None
    skills: tuple[str, ...] = ()  # candidate refs; empty: every stored skill of the robot
    begin_with: tuple[str, ...] = ()  # the chain must start with these skills


@dataclass(eq=False)
class LibraryProblem:
    """The pure problem plus what the CLI reports: the rig, skills, start distribution and stored-evidence notes."""

    problem: PlanProblem
    rig: Any
    start: Any
    skills: dict[str, LibrarySkill]
    goal: Any
    task_key: dict[str, Any]
    facts: FactCache | None = None
    memo: SolverMemo | None = None  # z3 answers of this run, and how many were asked and reused


def parse_goal(text: str, rig: Any) -> Any:
    """The goal predicate over the rig's named state; a bad one is bad input (exit 2) naming ``--goal``."""
    from ..predicates import PredicateError, parse_predicate

    try:
        return parse_predicate(text, rig.layout.shapes(), what="goal")
    except PredicateError as exc:
        # The predicate error names its field and fix itself; the option is the source.
        raise InvalidInputError([Problem("--goal", None, "", str(exc))]) from None


def _robot(env: str) -> tuple[str, int]:
    from ..tasks import default_rig

    rig = default_rig(env)
    return str(rig.metadata.get("robot")), int(rig.n_act)


def _candidate_refs(store: Any, rig: Any, task: PlanTask) -> list[str]:
    """Refs of the candidate skills: the listed ones, or every stored skill of the task's robot."""
    from ..errors import KinetomeError

    variant = getattr(rig.variant, "name", None)
    robot = (str(rig.metadata.get("robot")), int(rig.n_act))
    listed = list(dict.fromkeys([*task.begin_with, *task.skills])) if task.skills else None
    names = listed if listed is not None else list(dict.fromkeys([*task.begin_with, *(s.name for s in store.list_skills())]))
    pinned = {_base(b): b for b in task.begin_with if "@" in b}
    refs: list[str] = []
    problems: list[Problem] = []
    for name in names:
        name = pinned.get(name, name)
        try:
            version = store.get(name, task=variant)
        except KinetomeError as exc:
            problems.append(Problem("--skills", None, name, str(exc), "list stored skills (kinetome list) or pin an existing version"))
            continue
        env = version.meta.get("env")
        if not isinstance(env, str) or _robot(env) != robot:
            if listed is not None or name in task.begin_with:
                problems.append(Problem("--skills", None, name, f"{version.ref} runs {env}, another robot than {rig.env_id}", "list skills of this robot"))
            continue
        refs.append(version.ref)
    if problems:
        raise InvalidInputError(problems)
    return list(dict.fromkeys(refs))


def _base(ref: str) -> str:
    return ref.split("@", 1)[0]


def _start_distribution(task: PlanTask, rig: Any) -> Any:
    from ..tasks import load_start_file

    if isinstance(task.initial_states, Path):
        return load_start_file(task.initial_states)
    if isinstance(task.initial_states, Mapping):
        from kinetome.envs import EnvConfigError
        from kinetome.envs.starts import start_from_mapping

        try:
            return start_from_mapping(task.initial_states, source="initial states")
        except EnvConfigError as exc:
            raise InvalidInputError(list(exc.problems)) from None
    return None


def _start_particles(rig: Any, start: Any, n: int, seed: int) -> dict[str, np.ndarray]:
    from ..runtime.starts import named_state_of_states, sample_starts

    qpos, qvel = sample_starts(rig, start, n, seed=[seed, 3, 0, n])
    state = named_state_of_states(rig, qpos, qvel)
    return {k: np.asarray(v) for k, v in state.items() if not k.endswith("_jac")}


def _broken_pairs(store: Any, refs: list[str], task_key: Mapping[str, Any]) -> dict[tuple[str, str], str]:
    """Handoffs that stored check results on this task (env and variant digest) say break: (A, B) -> artifact."""
    by_identity = {store.get(r).identity: r for r in refs}
    out: dict[tuple[str, str], str] = {}
    for ref in refs:
        for art in store.artifacts(ref, kind=CHECK_RESULT_KIND, all_revisions=True):
            t = art.task or {}
            if t.get("env") != task_key["env"] or t.get("variant_digest") != task_key["variant_digest"]:
                continue
            ids = list(art.computed_on)
            try:
                data = json.loads(store.read_artifact(art, "result.json"))
            except Exception:  # an unreadable result is no evidence
                continue
            for h in data.get("handoffs", []):
                j = h.get("index", 0)
                if h.get("kind") == "handoff" and h.get("verdict") == "breaks" and 0 < j < len(ids):
                    a, b = by_identity.get(ids[j - 1]), by_identity.get(ids[j])
                    if a and b:
                        out[(a, b)] = art.ref
    return out


def _pair_fact(rig: Any, skills: Mapping[str, LibrarySkill], goal: Any, broken: Mapping, timeout_ms: int):
    """Pair facts: a handoff from stored breaks and region bounds only (its acceptance test on the particles is
    cheap, so a solver proof would save little); the goal from region bounds, then z3 (answers kept per question).
    Each skill's bound predicates and region atoms are built once."""
    from functools import lru_cache

    from ..checker.envelope import physical_envelope
    from ..checker.static_method import bind_parameters
    from .region_bounds import atoms_of, fixed_values, with_bounds

    state = set(rig.layout.names)
    declare = {n: s for n, s in rig.layout.shapes().items() if n in ("qpos", "qvel")}
    memo = SolverMemo()
    # the layout's premise bounds hold in every question (each skill's envelope only adds declared limits):
    # stop regions lie inside them, and a quantity they pin (a fixed target) is a constant
    layout = physical_envelope(rig, None, owner="the layout").bounds
    fixed = fixed_values(layout)

    @lru_cache(maxsize=None)
    def region(ref: str, which: str) -> tuple[Any, dict, Any]:
        s = skills[ref].loaded
        pred, const = bind_parameters(s.stops_when if which == "stop" else s.starts_when, s.parameters, state,
                                      "_a_" if which == "stop" else "_b_")
        atoms = atoms_of(pred, {**fixed, **const})
        return pred, const, with_bounds(atoms, layout) if which == "stop" else atoms

    goal_atoms = atoms_of(goal, fixed)

    def bounds_only(a: str, b: str | None) -> LinkFact:
        if b is not None and (a, b) in broken:
            return screen(a, b)
        if skills[a].loaded.learned_stop is not None:
            return LinkFact(OPEN, f"{a} has a learned stop (stochastic): measured, not proved")
        stop_atoms = region(a, "stop")[2]
        if b is not None:
            return bounds_fact(stop_atoms, region(b, "start")[2], a, f"{b} starts_when")
        return bounds_fact(stop_atoms, goal_atoms, a, "the goal")

    quick = FactCache(bounds_only)

    def with_solver(a: str, b: str | None) -> LinkFact:
        """The bounds fact; z3 only for a goal fact the bounds left open (never for a learned stop)."""
        known = quick(a, b)
        if b is not None or known.status != OPEN or skills[a].loaded.learned_stop is not None:
            return known
        stop, const_a, _ = region(a, "stop")
        envelope = physical_envelope(rig, skills[a].loaded.skill.limits, owner=a)
        return solver_fact(stop, goal, premises=envelope.premises, declare=declare, constants=const_a, bounds=envelope.bounds,
                           timeout_ms=timeout_ms, source=a, target_name="the goal", memo=memo)

    def screen(a: str, b: str) -> LinkFact:
        if (a, b) in broken:
            return LinkFact(BROKEN, f"stored check result {broken[(a, b)]} on this task: {a} -> {b} breaks")
        return LinkFact(OPEN)

    return FactCache(with_solver), screen, quick, memo


def _explain(skills: Mapping[str, LibrarySkill], goal: Any):
    from ..predicates import explain

    def why(target: str | None, states: Mapping[str, np.ndarray], row: int) -> str:
        pred, params = (goal, {}) if target is None else (skills[target].loaded.starts_when, skills[target].loaded.parameters)
        found = explain(pred, {**{k: np.asarray(v) for k, v in states.items()}, **params}, row)
        return "; ".join(str(v) for v in found[:2])

    return why


def build_problem(store: Any, task: PlanTask, *, particles: int = 200, seed: int = 0, confidence: float = 0.95, timeout_ms: int = 5_000) -> LibraryProblem:
    """Resolve the task, load the candidate skills and their option models, and wire the pair facts."""
    from ..api import model_task
    from ..checker.model_method import task_models
    from ..runtime.skill import load_skill
    from ..tasks import load_variant_file, task_rig

    rig = task_rig(task.env, load_variant_file(task.variant))
    goal = parse_goal(task.goal, rig)
    start = _start_distribution(task, rig)
    refs = _candidate_refs(store, rig, task)
    if not refs:
        raise InvalidInputError([Problem("--skills", None, "skills", f"no stored skill runs the robot of {rig.env_id}", "register skills of this robot first (kinetome register configs/skills/*.yaml)")])
    key = model_task(rig)
    skills: dict[str, LibrarySkill] = {}
    for ref in refs:
        models, why = task_models(store, ref, key)
        skills[ref] = LibrarySkill(load_skill(store, ref, rig=rig), rig, models, why, seed=seed, confidence=confidence)
    facts, screen, quick, memo = _pair_fact(rig, skills, goal, _broken_pairs(store, refs, key), timeout_ms)
    begin = tuple(next(r for r in refs if _base(r) == _base(b)) for b in task.begin_with)
    problem = PlanProblem(
        skills=skills, start=_start_particles(rig, start, particles, seed), in_goal=lambda s: goal.evaluate(s),
        link=lambda a, b: facts(a, b), goal_link=lambda a: facts(a, None), explain=_explain(skills, goal), begin_with=begin,
        screen=screen, quick_goal_link=lambda a: quick(a, None),
    )
    return LibraryProblem(problem, rig, start, skills, goal, key, facts, memo)

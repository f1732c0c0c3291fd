"""Structural checks, run before any other method: same robot, same action size, same state layout.

A mismatch is a ``breaks`` verdict with its reason: no state can make such a
handoff work. (That every referenced version exists is checked when the chain
is loaded: a missing one is bad input, exit code 2.)
"""

from __future__ import annotations

from typing import Any

from .evidence import Evidence, Handoff
from .verdict import Verdict

__all__ = ["structural_check", "skill_rig"]


def skill_rig(ctx: Any, env_id: str) -> Any:
    """The rig of a skill's own env (no variant), cached per check."""
    key = f"rig:{env_id}"
    if key not in ctx.cache:
        if env_id == ctx.rig.env_id:
            ctx.cache[key] = ctx.rig
        else:
            from ..tasks import task_rig

            ctx.cache[key] = task_rig(env_id)
    return ctx.cache[key]


def _robot(rig: Any) -> str:
    return str(rig.metadata.get("robot", rig.env_id))


def _names_read(skill: Any) -> set[str]:
    names = set(skill.starts_when.names) | set(skill.stops_when.names)
    names |= set(getattr(skill.controller, "inputs", ()) or ())
    return {n for n in names if not n.endswith("_jac")} - set(skill.parameters)


def _skill_problems(ctx: Any, index: int) -> list[str]:
    """Does step ``index`` fit the chain's rig (robot, actions, layout of what it reads)?"""
    skill = ctx.skills[index]
    own = skill_rig(ctx, ctx.skill_envs[index])
    chain_rig = ctx.rig
    out = []
    if _robot(own) != _robot(chain_rig):
        out.append(f"{skill.ref} is a skill of robot {_robot(own)!r} ({own.env_id}), the chain runs robot {_robot(chain_rig)!r} ({chain_rig.env_id})")
        return out
    if own.n_act != chain_rig.n_act:
        out.append(f"{skill.ref} acts on {own.n_act} actuators, {chain_rig.env_id} has {chain_rig.n_act}")
    own_shapes, chain_shapes = own.layout.shapes(), chain_rig.layout.shapes()
    for name in sorted(_names_read(skill)):
        if name not in chain_shapes:
            out.append(f"{skill.ref} reads {name!r}, which {chain_rig.env_id} does not expose (it has {', '.join(chain_rig.layout.names)})")
        elif name in own_shapes and own_shapes[name] != chain_shapes[name]:
            out.append(f"{skill.ref} reads {name} with shape {own_shapes[name]}, {chain_rig.env_id} gives {chain_shapes[name]}")
    return out


def _other_env_notes(ctx: Any, per_skill: dict[int, list[str]]) -> list[str]:
    """A note per skill declared on another env of the chain's robot: it runs in the chain's env."""
    out = []
    for i, skill in enumerate(ctx.skills):
        own = ctx.skill_envs[i]
        if own and own != ctx.rig.env_id and not per_skill[i]:
            out.append(
                f"{skill.ref} is declared on env {own} and runs here in env {ctx.rig.env_id} (the same robot, "
                f"{_robot(ctx.rig)!r}): its controller, starts_when and stops_when are unchanged, but the reward, "
                f"the env's own episode end and the default initial states are {ctx.rig.env_id}'s"
            )
    return out


def structural_check(ctx: Any, checked: list[Handoff]) -> dict[int, Evidence]:
    """Per handoff: ``breaks`` with the reasons when the two sides do not fit, else undecided.
    Skills declared on another env of the same robot fit; the check notes where they run."""
    per_skill = {i: _skill_problems(ctx, i) for i in range(len(ctx.skills))}
    ctx.notes.extend(_other_env_notes(ctx, per_skill))
    out: dict[int, Evidence] = {}
    for j in checked:
        problems = list(per_skill[j.index])
        if not j.is_entry:
            a = ctx.skill_envs[j.index - 1]
            b = ctx.skill_envs[j.index]
            ra, rb = _robot(skill_rig(ctx, a)), _robot(skill_rig(ctx, b))
            if ra != rb:
                problems.insert(0, f"{j.source} runs robot {ra!r}, {j.target} runs robot {rb!r}: consecutive skills must share one robot")
            problems += [p for p in per_skill[j.index - 1] if p not in problems]
        if problems:
            out[j.index] = Evidence("structural", Verdict.BREAKS, "; ".join(problems), details={"problems": problems})
        else:
            out[j.index] = Evidence("structural", Verdict.UNSURE, "robot, actions and state layout match")
    return out

"""Confirm the search's best candidates with the checker's simulation, rank them, explain the rejected ones.

Each candidate becomes a chain (versions pinned) and goes through ``kinetome check``'s
own path (``prepare_context`` + ``run_check``, method ``auto``). Candidates are ranked
by the one-sided lower bound of measured whole-chain success (where the goal is not
proved to follow from the last skill's stop region, success also needs the goal to
hold in the last end state: an exact one-sided bound over the episodes run), then by
the mean duration of the successful episodes. A check stored before with the same
identities, task, settings and software is reused (the checker's rule), except where
the goal must be measured on the episodes themselves; every fresh check is stored. A rejected candidate is explained by
its first failing handoff (entry included), else by the whole chain's bound.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from .search import PROVED, Candidate

__all__ = ["Confirmation", "ChainSettings", "candidate_chain", "confirm_candidates", "chain_yaml"]


@dataclass(frozen=True)
class ChainSettings:
    """What the confirmed chain file asks of a check."""

    name: str = "planned-chain"
    require: float = 0.95
    confidence: float = 0.95
    episodes: int = 200
    seed: int = 0


@dataclass(frozen=True, eq=False)
class Confirmation:
    """One candidate after its check: the result, the measured bound and duration, and why it lost (if it did)."""

    candidate: Candidate
    chain: Any  # checker Chain
    result: Any  # CheckResult
    lower: float  # one-sided lower bound of measured whole-chain success (goal included)
    goal_successes: int
    episodes: int
    duration: float  # mean steps of the successful episodes (nan if none)
    failure: str  # first failing handoff, or "" when the chain composes and meets its requirement

    @property
    def passed(self) -> bool:
        return not self.failure

    def to_dict(self) -> dict[str, Any]:
        return {
            "skills": list(self.chain.skills), "exit_code": self.result.exit_code, "lower_bound": self.lower,
            "goal_successes": self.goal_successes, "episodes": self.episodes,
            "mean_duration_steps": None if not np.isfinite(self.duration) else self.duration,
            "failure": self.failure or None, "predicted": self.candidate.to_dict(),
        }


def candidate_chain(candidate: Candidate, task: Any, settings: ChainSettings, *, description: str = "") -> Any:
    """A checker Chain for a candidate (versions pinned, the plan's task)."""
    from ..checker import Chain

    return Chain(
        name=settings.name, env=task.env, skills=tuple(candidate.skills), description=description, variant=task.variant,
        initial_states=task.initial_states, require_handoff=settings.require, require_chain=settings.require,
        confidence=settings.confidence, episodes=settings.episodes, seed=settings.seed, source="<plan>",
    )


def _first_failure(result: Any, data: Mapping[str, Any]) -> str:
    for h in result.all_handoffs:
        if h.verdict.value != "composes":
            return f"{h.label}: {h.verdict.value} ({h.reason})"
    if result.exit_code != 0:
        low = ((data.get("whole_chain") or {}).get("success") or {}).get("lower_bound")
        shown = "none" if low is None else f"{low:.3f}"
        return f"whole chain: lower bound {shown} does not meet require.chain {data['chain']['require']['chain']}"
    return ""


def _goal_counts(ctx: Any, goal: Any) -> tuple[int, int]:
    """Episodes that completed the chain and ended inside the goal, of all episodes simulated."""
    sim = ctx.cache.get("simulation")
    if sim is None:
        return 0, 0
    ok = np.asarray(sim.outcome.trials.chain, dtype=bool)
    last = sim.rollout.segments[-1].end_state
    inside = np.asarray(goal.evaluate({k: np.asarray(v) for k, v in last.items() if not k.endswith("_jac")}), dtype=bool)
    return int(np.sum(ok & inside)), int(ok.size)


def _check(store: Any, chain: Any, *, reuse: bool, threads: int, progress: Any) -> tuple[Any, Any]:
    """The checker's own path (stored result reused when allowed, a fresh one kept); the context when it ran."""
    from ..checker import CheckOptions, prepare_context, run_check
    from ..checker.reuse import check_key, find_stored, store_check, stored_about

    ctx = prepare_context(chain, store=store, options=CheckOptions(method="auto", threads=threads, progress=progress))
    key = check_key(ctx)
    if key is not None and reuse:
        stored = find_stored(store, key)
        if stored is not None:
            return stored, None
    result = run_check(ctx)
    if key is not None:
        try:
            result = replace(result, stored=stored_about(store_check(store, key, result)))
        except Exception as exc:  # a store that refuses the write costs the reuse, not the result
            result = replace(result, notes=(*result.notes, f"result not stored for reuse: {type(exc).__name__}: {exc}"))
    return result, ctx


def _confirm_one(store: Any, candidate: Candidate, chain: Any, goal: Any, *, threads: int, progress: Any) -> Confirmation:
    from ..checker.stats import lower_bound

    measured_goal = candidate.goal.status != PROVED
    result, ctx = _check(store, chain, reuse=not measured_goal, threads=threads, progress=progress)
    data = result.to_dict()
    whole = data.get("whole_chain") or {}
    success = whole.get("success") or {}
    lower = float(success.get("lower_bound") or 0.0)
    k, n = _goal_counts(ctx, goal) if ctx is not None else (int(success.get("successes") or 0), int(whole.get("episodes") or 0))
    failure = _first_failure(result, data)
    if measured_goal and n:
        lower = min(lower, lower_bound(k, n, chain.confidence))
        if not failure and lower < chain.chain_requirement:
            failure = (f"{chain.skills[-1]} -> goal: {k} of {n} episodes ended inside the goal; lower bound {lower:.3f} "
                       f"does not meet {chain.chain_requirement}")
    duration = (whole.get("duration") or {}).get("success_mean")
    return Confirmation(candidate, chain, result, lower, k, n, float("nan") if duration is None else float(duration), failure)


def confirm_candidates(
    store: Any, candidates: list[Candidate], task: Any, goal: Any, settings: ChainSettings, *, threads: int = 1, progress: Any = None,
) -> list[Confirmation]:
    """Check every candidate; passed ones first by (lower bound desc, duration asc), then the rest in search order."""
    out = []
    for i, cand in enumerate(candidates):
        chain = candidate_chain(cand, task, settings, description=f"found by kinetome plan (candidate {i + 1}) for goal: {task.goal}")
        out.append(_confirm_one(store, cand, chain, goal, threads=threads, progress=progress))
    passed = sorted((c for c in out if c.passed), key=lambda c: (-c.lower, c.duration if np.isfinite(c.duration) else float("inf")))
    return passed + [c for c in out if not c.passed]


def chain_yaml(chain: Any, goal_text: str, where: Path) -> str:
    """The chain as a chain file (paths relative to ``where``'s folder), ready for ``kinetome check``."""
    import os

    import yaml

    def rel(p: Any) -> Any:
        if isinstance(p, Path):
            return os.path.relpath(p, where.resolve().parent)
        return dict(p) if isinstance(p, Mapping) else p

    task: dict[str, Any] = {"env": chain.env}
    if chain.variant is not None:
        task["variant"] = rel(chain.variant)
    if chain.initial_states is not None:
        task["initial_states"] = rel(chain.initial_states)
    doc = {
        "name": chain.name, "description": chain.description, "task": task, "skills": list(chain.skills),
        "require": {"handoff": chain.require_handoff, "chain": chain.chain_requirement}, "confidence": chain.confidence,
        "episodes": chain.episodes, "seed": chain.seed,
    }
    head = f"# found by kinetome plan; goal: {goal_text}\n# check it with: kinetome check {where.name}\n"
    return head + yaml.safe_dump(doc, sort_keys=False, default_flow_style=None)

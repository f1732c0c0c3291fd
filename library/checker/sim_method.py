"""Simulation method: run the chain in MuJoCo, block by block, and count who hands over.

Per handoff A -> B: n = episodes where A ran, k = those where A ended by its stop
condition (or timed out, where the chain allows it) and B's ``starts_when`` held.
A timeout that is not allowed, or the env ending the episode, is a failed
handoff and ends that episode's chain. Only distinct trajectories count
(``trials.py``); verdicts follow ``decision.py``, and how many episodes run
follows the plan (``sequential.py``: fixed for ``--method sim``, a curtailed
zero-failure stage then the rest for ``--method auto``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Iterator

import numpy as np

from .chain_stats import ChainStats, chain_stats_from_rollout
from .evidence import Evidence, Handoff, counterexample_from
from .registry import checker_method
from .sequential import PlanRun, SimPlan, auto_plan, fixed_plan, run_plan
from .trials import trials_from_rollout

__all__ = ["sim_method", "simulate_chain", "simulation_plan", "Simulation", "MAX_POINTS"]

MAX_POINTS = 2000  # end states kept per handoff for plots


@dataclass(frozen=True, eq=False)
class Simulation:
    """One simulation check: the plan, what it decided, and every episode run (block order)."""

    plan: SimPlan
    outcome: PlanRun
    rollout: Any  # ChainRollout of every episode run
    stats: ChainStats


def simulation_plan(ctx: Any) -> SimPlan:
    chain = ctx.chain
    if ctx.options.method == "sim":
        return fixed_plan(ctx.episodes, confidence=chain.confidence, block_size=ctx.options.block_size)
    require = max(chain.require_handoff, chain.chain_requirement)
    return auto_plan(ctx.episodes, require=require, confidence=chain.confidence, block_size=ctx.options.block_size)


def simulate_chain(ctx: Any) -> Simulation:
    """The chain's simulation for this check (run once, cached). Blocks run where the options say
    (this process, Ray workers or a cluster) and are judged in block order, so the result is the same."""
    if "simulation" in ctx.cache:
        return ctx.cache["simulation"]
    from ..execution import executor_for
    from ..runtime.records import ChainRollout

    chain, flags = ctx.chain, ctx.chain.may_time_out
    plan = simulation_plan(ctx)
    parts: list[Any] = []

    def judged(rollouts: Iterator[Any]) -> Iterator[Any]:
        try:
            for rollout in rollouts:
                parts.append(rollout)
                if ctx.options.progress is not None:
                    ctx.options.progress(sum(p.n_episodes for p in parts), plan.budget)
                yield trials_from_rollout(rollout, flags)
        finally:
            close = getattr(rollouts, "close", None)
            if close is not None:
                close()

    executor = executor_for(ctx.options.workers, ctx.options.address)
    try:
        outcome = run_plan(
            plan, run_blocks=lambda blocks: judged(_block_rollouts(ctx, executor, blocks)),
            require_handoff=chain.require_handoff, require_chain=chain.chain_requirement, confidence=chain.confidence,
        )
    finally:
        executor.close()
    rollout = ChainRollout.concatenate(parts)
    stats = chain_stats_from_rollout(
        rollout, dt=ctx.rig.dt, success=outcome.decision.chain, chain_ok=outcome.trials.chain, distinct=outcome.decision.distinct,
        may_time_out=flags, stages=outcome.run, rule=plan.rule, disturbances=chain.disturbances.to_dict(),
    )
    ctx.cache["simulation"] = Simulation(plan, outcome, rollout, stats)
    return ctx.cache["simulation"]


def _block_rollouts(ctx: Any, executor: Any, blocks: tuple[tuple[int, int], ...]) -> Iterator[Any]:
    """Each (first, stop) block's ChainRollout, in block order: here one after another, or on workers."""
    from ..execution import Block, InProcessExecutor
    from ..execution.chain_blocks import chain_job, run_chain_blocks
    from ..runtime.execute import run_chain

    chain = ctx.chain
    run = dict(seed=ctx.seed, gamma=ctx.options.gamma, disturbances=chain.disturbances, may_time_out=chain.may_time_out)
    if isinstance(executor, InProcessExecutor):
        for first, stop in blocks:
            yield run_chain(list(ctx.skills), ctx.rig, starts=ctx.block_starts(first, stop), workers=ctx.options.threads,
                            episode_ids=np.arange(first, stop), **run)
        return
    job = chain_job(list(ctx.skills), ctx.rig, built_for=ctx.built_for or None, threads=1, **run)
    spread = [Block(i, a, b - a) for i, (a, b) in enumerate(blocks)]
    yield from run_chain_blocks(executor, job, spread, lambda blk: ctx.block_starts(blk.first, blk.stop))


def _take(values: dict, rows: np.ndarray) -> dict:
    return {k: np.asarray(v)[rows] for k, v in values.items() if not k.endswith("_jac")}


def _single_start_text(sim: Simulation, happened: str) -> str:
    n = sim.outcome.decision.episodes
    return (
        f"one distinct trajectory in {n} episodes (deterministic initial state and policy): {happened}; "
        f"the verdict holds for that single start only, no bound from repetition"
    )


def _handoff_details(a_seg: Any, b_seg: Any, rows: slice, allowed: bool) -> dict[str, int | bool]:
    """Outcome counts of A and B over the episodes ``rows`` (the stage that decided)."""
    from ..runtime.records import EndReason

    a, b = a_seg.reason[rows], b_seg.reason[rows]
    stopped = a == int(EndReason.STOPPED)
    timed_out = a == int(EndReason.TIMED_OUT)
    refused = b == int(EndReason.REFUSED)
    return {
        "source_ran": int(np.sum(np.isin(a, [int(EndReason.STOPPED), int(EndReason.TIMED_OUT), int(EndReason.ENV_ENDED)]))),
        "stopped": int(stopped.sum()),
        "refused_after_stop": int(np.sum(stopped & refused)),
        "timed_out": int(timed_out.sum()),
        "may_time_out": allowed,
        "refused_after_timeout": int(np.sum(timed_out & refused)),
        "env_ended": int(np.sum(a == int(EndReason.ENV_ENDED))),
        "episodes": int(a.shape[0]),
    }


def _handoff_reason(j: Handoff, est: Any, d: dict, stage: str, sim: Simulation) -> str:
    if est.single_start:
        return _single_start_text(sim, f"{j.source} {'handed over to' if est.k else 'did not hand over to'} {j.target}")
    if est.n == 0:
        return f"{j.source} never ran (an earlier handoff failed in every episode)"
    where = "" if len(sim.outcome.run) == 1 else f" in the {stage} stage ({d['episodes']} episodes)"
    timeouts = f"{d['timed_out']} timed out" + (" (allowed)" if d["may_time_out"] else "")
    distinct = "" if est.n == d["source_ran"] else f"; {est.n} distinct trajectories"
    return (
        f"{est.k} of {est.n} runs of {j.source} handed over to {j.target}{where} ({d['stopped']} stopped, {timeouts}, "
        f"{d['env_ended']} env ended, {d['refused_after_stop'] + d['refused_after_timeout']} refused by {j.target}{distinct})"
    )


_LIMIT_UNITS = {"joint_speed": "rad/s", "end_effector_speed": "m/s", "torque": "N m"}


def handoff_feel(a: Any, a_seg: Any, b_seg: Any, ran: np.ndarray) -> dict[str, Any]:
    """What the next skill feels: A's worst value against each of its declared limits (episodes
    where A ran) and the jump in commanded action at the switch (episodes where B acted)."""
    limits = []
    declared = getattr(a.skill, "limits", None)
    for name, unit in _LIMIT_UNITS.items():
        bound = getattr(declared, name, None) if declared is not None else None
        peaks = a_seg.peaks.get(name)
        if bound is None or peaks is None or not np.any(ran):
            continue
        worst = float(np.max(peaks[ran]))
        limits.append({"limit": name, "declared": float(bound), "worst": worst, "unit": unit, "exceeded": worst > bound + 1e-9, "episodes": int(ran.sum())})
    jump = None
    if a_seg.last_command is not None and b_seg.first_command is not None:
        both = np.all(np.isfinite(a_seg.last_command), axis=1) & np.all(np.isfinite(b_seg.first_command), axis=1)
        if np.any(both):
            size = np.max(np.abs(b_seg.first_command[both] - a_seg.last_command[both]), axis=1)
            jump = {"max": float(size.max()), "p95": float(np.quantile(size, 0.95)), "switches": int(both.sum())}
    return {"limits": limits, "command_jump": jump}


def _handoff(ctx: Any, j: Handoff, sim: Simulation) -> Evidence:
    from ..runtime.records import EndReason

    rollout = sim.rollout
    a_seg, b_seg = rollout.segments[j.index - 1], rollout.segments[j.index]
    b = ctx.target_skill(j)
    allowed = ctx.chain.may_time_out[j.index - 1]
    est = sim.outcome.decision.all_handoffs[j.index]
    stage = sim.outcome.decided_in.get(str(j.index), "")
    d = _handoff_details(a_seg, b_seg, sim.outcome.rows(stage), allowed)
    ended = (a_seg.reason == int(EndReason.STOPPED)) | ((a_seg.reason == int(EndReason.TIMED_OUT)) if allowed else False)
    refused = b_seg.reason == int(EndReason.REFUSED)
    names = tuple(ctx.layout.names)
    cex = tuple(
        counterexample_from(b.starts_when, a_seg.end_state, int(r), parameters=b.parameters, names=names, source="sim", confirmed=True,
                            note=f"episode {int(rollout.episode_ids[r])}, {j.source} {'stopped' if a_seg.reason[r] == 0 else 'timed out'}")
        for r in np.flatnonzero(ended & refused)[: ctx.options.max_counterexamples]
    )
    rows = np.flatnonzero(ended)[:MAX_POINTS]
    return Evidence(
        "sim", est.verdict, _handoff_reason(j, est, d, stage, sim), estimate=est, counterexamples=cex,
        details={**d, "decided_in_stage": stage, "episodes_run": rollout.n_episodes,
                 **handoff_feel(ctx.source_skill(j), a_seg, b_seg, np.isin(a_seg.reason, [0, 1, 2]))},
        points=_take(a_seg.end_state, rows), accepted=(~refused)[rows],
    )


@checker_method("sim", cost=30, summary="MuJoCo: run the chain in blocks of episodes, one-sided exact bounds")
def sim_method(ctx: Any, checked: list[Handoff]) -> dict[int, Evidence]:
    """MuJoCo: run the chain in blocks of episodes, one-sided exact bounds (the entry is sampled in entry.py)."""
    sim = simulate_chain(ctx)
    ctx.chain_stats = sim.stats
    return {j.index: _handoff(ctx, j, sim) for j in checked if not j.is_entry}

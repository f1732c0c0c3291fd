"""Simulation method: run the whole chain in MuJoCo from the start distribution and count handoffs.

Per handoff A -> B the measured probability is P(B accepts | A stopped):
k = episodes where A stopped and B accepted, n = episodes where A stopped.
Timeouts of A (it hands over outside its stop region) and env terminations
are counted separately; refused end states are the counterexamples.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .chain_stats import chain_stats_from_rollout
from .evidence import Evidence, Junction, counterexample_from
from .registry import checker_method
from .verdict import estimate

__all__ = ["sim_method", "simulate_chain", "MAX_POINTS"]

MAX_POINTS = 2000  # end states kept per handoff for plots


def simulate_chain(ctx: Any) -> Any:
    """The chain's rollout for this check (run once, cached): ``episodes`` starts on ``workers`` threads."""
    if "rollout" not in ctx.cache:
        from ..runtime.execute import run_chain

        qpos, qvel = ctx.start_states(ctx.episodes, seed=ctx.seed)
        ctx.cache["rollout"] = run_chain(
            list(ctx.skills), ctx.rig, starts=(qpos, qvel), seed=ctx.seed, workers=ctx.options.workers, gamma=ctx.options.gamma,
            progress=ctx.options.progress,
        )
    return ctx.cache["rollout"]


def _take(values: dict, rows: np.ndarray) -> dict:
    return {k: np.asarray(v)[rows] for k, v in values.items() if not k.endswith("_jac")}


def _entry(ctx: Any, j: Junction, rollout: Any) -> Evidence:
    from ..runtime.records import EndReason

    seg = rollout.segments[0]
    b = ctx.target_skill(j)
    n = rollout.n_episodes
    refused = seg.reason == int(EndReason.REFUSED)
    est = estimate(n - int(refused.sum()), n, require=ctx.chain.require, confidence=ctx.chain.confidence)
    rows = np.flatnonzero(refused)[: ctx.options.max_counterexamples]
    names = tuple(ctx.layout.names)
    cex = tuple(
        counterexample_from(b.starts_when, seg.start_state, int(r), parameters=b.parameters, names=names, source="sim", confirmed=True, note=f"episode {int(r)} start")
        for r in rows
    )
    keep = np.arange(min(n, MAX_POINTS))
    return Evidence(
        "sim", est.verdict, f"{est.k} of {n} start states accepted", estimate=est, counterexamples=cex,
        details={"episodes": n, "refused": int(refused.sum())},
        points=_take(seg.start_state, keep), accepted=~refused[keep],
    )


def _handoff(ctx: Any, j: Junction, rollout: Any) -> Evidence:
    from ..runtime.records import EndReason

    a_seg, b_seg = rollout.segments[j.index - 1], rollout.segments[j.index]
    b = ctx.target_skill(j)
    stopped = a_seg.reason == int(EndReason.STOPPED)
    timed_out = a_seg.reason == int(EndReason.TIMED_OUT)
    refused = b_seg.reason == int(EndReason.REFUSED)
    accepted = stopped & ~refused
    n, k = int(stopped.sum()), int(accepted.sum())
    est = estimate(k, n, require=ctx.chain.require, confidence=ctx.chain.confidence)
    bad = np.flatnonzero(stopped & refused)
    names = tuple(ctx.layout.names)
    cex = tuple(
        counterexample_from(b.starts_when, a_seg.end_state, int(r), parameters=b.parameters, names=names, source="sim", confirmed=True, note=f"episode {int(r)}, {j.source} stopped")
        for r in bad[: ctx.options.max_counterexamples]
    )
    ran = int(np.sum((a_seg.reason != int(EndReason.NOT_REACHED)) & (a_seg.reason != int(EndReason.REFUSED))))
    details = {
        "source_ran": ran,
        "stopped": n,
        "accepted_after_stop": k,
        "refused_after_stop": n - k,
        "timed_out": int(timed_out.sum()),
        "accepted_after_timeout": int(np.sum(timed_out & ~refused)),
        "refused_after_timeout": int(np.sum(timed_out & refused)),
        "env_terminated": a_seg.count(EndReason.TERMINATED),
        "episodes": rollout.n_episodes,
    }
    if n == 0:
        reason = f"{j.source} never stopped by its stops_when in {ran} runs ({details['timed_out']} timed out)"
    else:
        reason = f"{k} of {n} stops of {j.source} accepted by {j.target}"
    rows = np.flatnonzero(stopped)[:MAX_POINTS]
    return Evidence(
        "sim", est.verdict, reason, estimate=est, counterexamples=cex, details=details,
        points=_take(a_seg.end_state, rows), accepted=accepted[rows],
    )


@checker_method("sim", cost=30, summary="MuJoCo: run the chain from the start distribution, exact binomial intervals")
def sim_method(ctx: Any, junctions: list[Junction]) -> dict[int, Evidence]:
    """MuJoCo: run the chain from the start distribution, exact binomial intervals."""
    rollout = simulate_chain(ctx)
    ctx.chain_stats = chain_stats_from_rollout(rollout, dt=ctx.rig.dt, require=ctx.chain.require, confidence=ctx.chain.confidence)
    out: dict[int, Evidence] = {}
    for j in junctions:
        out[j.index] = _entry(ctx, j, rollout) if j.is_entry else _handoff(ctx, j, rollout)
    return out

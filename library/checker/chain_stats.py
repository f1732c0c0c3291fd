"""Whole-chain numbers from a simulation: success with its bounds and requirement verdict, duration, return, per-skill timing."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .verdict import Estimate

__all__ = ["ChainStats", "SkillTiming", "chain_stats_from_rollout"]


@dataclass(frozen=True)
class SkillTiming:
    """How one skill of the chain ran: outcomes, and its duration (steps) where it ran."""

    ref: str
    offered: int  # episodes that reached this skill
    ran: int  # accepted its initial state
    stopped: int
    timed_out: int
    env_ended: int
    refused: int
    may_time_out: bool
    duration_mean: float
    duration_p10: float
    duration_p50: float
    duration_p90: float
    start_mean: float  # mean step at which the skill started, over episodes where it ran

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class ChainStats:
    """Whole chain over ``episodes`` simulated episodes; durations in steps (``dt`` seconds each).

    ``success`` is over the ``distinct_trajectories`` (its verdict: the chain requirement
    is met, failed or unsure); ``stages`` gives the episodes each stage of the plan ran.
    """

    episodes: int
    distinct_trajectories: int
    success: Estimate
    dt: float
    duration: dict[str, float]
    ret: dict[str, float]
    skills: tuple[SkillTiming, ...]
    stages: dict[str, int]
    rule: str
    disturbances: dict[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return {
            "episodes": self.episodes,
            "distinct_trajectories": self.distinct_trajectories,
            "success": self.success.to_dict(),
            "requirement": self.success.verdict.value,
            "stages": dict(self.stages),
            "rule": self.rule,
            "disturbances": dict(self.disturbances),
            "dt": self.dt,
            "duration": dict(self.duration),
            "seconds": {k: v * self.dt for k, v in self.duration.items()},
            "return": dict(self.ret),
            "skills": [s.to_dict() for s in self.skills],
        }


def _quantiles(x: np.ndarray) -> tuple[float, float, float, float]:
    if x.size == 0:
        nan = float("nan")
        return nan, nan, nan, nan
    x = x.astype(np.float64)
    return float(np.mean(x)), float(np.quantile(x, 0.1)), float(np.quantile(x, 0.5)), float(np.quantile(x, 0.9))


def chain_stats_from_rollout(
    rollout: Any, *, dt: float, success: Estimate, chain_ok: np.ndarray, distinct: int, may_time_out: tuple[bool, ...],
    stages: dict[str, int], rule: str, disturbances: dict[str, Any],
) -> ChainStats:
    """Summarise a ChainRollout; ``chain_ok`` (n,) marks the episodes that completed the chain."""
    from ..runtime.records import EndReason

    n = rollout.n_episodes
    total = rollout.total_steps.astype(np.float64)
    mean, p10, p50, p90 = _quantiles(total)
    smean, _, sp50, _ = _quantiles(total[chain_ok])
    # discounted return of the chain: sum_i (prod_{j<i} gamma^{k_j}) * G_i
    carry = np.ones(n)
    disc = np.zeros(n)
    for seg in rollout.segments:
        disc += carry * np.where(seg.started, seg.discounted_return, 0.0)
        carry = carry * np.where(seg.started, seg.discount, 1.0)
    ret = rollout.total_reward
    timings = []
    clock = np.zeros(n)
    for seg, allowed in zip(rollout.segments, may_time_out):
        reason = seg.reason
        ran = (reason != int(EndReason.NOT_REACHED)) & (reason != int(EndReason.REFUSED))
        m, q10, q50, q90 = _quantiles(seg.steps[ran])
        timings.append(
            SkillTiming(
                ref=seg.skill_ref,
                offered=int(np.sum(seg.started)),
                ran=int(np.sum(ran)),
                stopped=seg.count(EndReason.STOPPED),
                timed_out=seg.count(EndReason.TIMED_OUT),
                env_ended=seg.count(EndReason.ENV_ENDED),
                refused=seg.count(EndReason.REFUSED),
                may_time_out=bool(allowed),
                duration_mean=m,
                duration_p10=q10,
                duration_p50=q50,
                duration_p90=q90,
                start_mean=float(np.mean(clock[ran])) if np.any(ran) else float("nan"),
            )
        )
        clock = clock + seg.steps
    return ChainStats(
        episodes=n,
        distinct_trajectories=int(distinct),
        success=success,
        dt=float(dt),
        duration={"mean": mean, "p10": p10, "p50": p50, "p90": p90, "success_mean": smean, "success_p50": sp50},
        ret={"mean": float(np.mean(ret)) if n else float("nan"), "std": float(np.std(ret)) if n else float("nan"),
             "discounted_mean": float(np.mean(disc)) if n else float("nan"), "gamma": float(rollout.gamma)},
        skills=tuple(timings),
        stages=dict(stages),
        rule=rule,
        disturbances=dict(disturbances),
    )

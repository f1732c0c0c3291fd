"""Whole-chain numbers from a simulation: success with an exact interval, duration, return, per-skill timing."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from .verdict import Estimate, estimate

__all__ = ["ChainStats", "SkillTiming", "chain_stats_from_rollout"]


@dataclass(frozen=True)
class SkillTiming:
    """How one chain step ran: end reasons and how long it took (env steps) where it ran."""

    ref: str
    offered: int  # episodes that reached this step
    ran: int  # accepted its start state
    stopped: int
    timed_out: int
    env_terminated: int
    refused: int
    steps_mean: float
    steps_p10: float
    steps_p50: float
    steps_p90: float
    start_mean: float  # mean env step at which the skill started, over episodes where it ran

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


@dataclass(frozen=True)
class ChainStats:
    """Whole chain over ``episodes`` simulated episodes; durations in env steps (``dt`` seconds each)."""

    episodes: int
    success: Estimate
    dt: float
    steps: dict[str, float]
    ret: dict[str, float]
    skills: tuple[SkillTiming, ...]

    def to_dict(self) -> dict[str, Any]:
        return {
            "episodes": self.episodes,
            "success": self.success.to_dict(),
            "dt": self.dt,
            "steps": dict(self.steps),
            "seconds": {k: v * self.dt for k, v in self.steps.items()},
            "return": dict(self.ret),
            "skills": [s.to_dict() for s in self.skills],
        }


def _quantiles(x: np.ndarray) -> tuple[float, float, float, float]:
    if x.size == 0:
        nan = float("nan")
        return nan, nan, nan, nan
    x = x.astype(np.float64)
    return float(np.mean(x)), float(np.quantile(x, 0.1)), float(np.quantile(x, 0.5)), float(np.quantile(x, 0.9))


def chain_stats_from_rollout(rollout: Any, *, dt: float, require: float, confidence: float) -> ChainStats:
    """Summarise a ChainRollout: success = every skill stopped by its stops_when."""
    from ..runtime.records import EndReason

    n = rollout.n_episodes
    success = rollout.success
    k = int(np.sum(success))
    total = rollout.total_steps.astype(np.float64)
    mean, p10, p50, p90 = _quantiles(total)
    smean, _, sp50, _ = _quantiles(total[success])
    # discounted return of the chain: sum_i (prod_{j<i} gamma^{k_j}) * G_i
    carry = np.ones(n)
    disc = np.zeros(n)
    for seg in rollout.segments:
        disc += carry * np.where(seg.started, seg.discounted_return, 0.0)
        carry = carry * np.where(seg.started, seg.discount, 1.0)
    ret = rollout.total_reward
    timings = []
    clock = np.zeros(n)
    for seg in rollout.segments:
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
                env_terminated=seg.count(EndReason.TERMINATED),
                refused=seg.count(EndReason.REFUSED),
                steps_mean=m,
                steps_p10=q10,
                steps_p50=q50,
                steps_p90=q90,
                start_mean=float(np.mean(clock[ran])) if np.any(ran) else float("nan"),
            )
        )
        clock = clock + seg.steps
    return ChainStats(
        episodes=n,
        success=estimate(k, n, require=require, confidence=confidence),
        dt=float(dt),
        steps={"mean": mean, "p10": p10, "p50": p50, "p90": p90, "success_mean": smean, "success_p50": sp50},
        ret={"mean": float(np.mean(ret)) if n else float("nan"), "std": float(np.std(ret)) if n else float("nan"),
             "discounted_mean": float(np.mean(disc)) if n else float("nan"), "gamma": float(rollout.gamma)},
        skills=tuple(timings),
    )

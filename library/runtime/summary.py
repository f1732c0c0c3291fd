"""Numbers a user reads after a run: successes with an exact interval, duration, return, outcomes."""

from __future__ import annotations

from typing import Any

import numpy as np

from .records import ChainRollout, EndReason

__all__ = ["summarize_rollout", "limit_exceedances"]


def limit_exceedances(rollout: ChainRollout, limits_by_segment: list[dict[str, float]]) -> list[dict[str, Any]]:
    """Per skill and declared limit: episodes whose peak exceeded it, and the worst peak."""
    rows = []
    for seg, limits in zip(rollout.segments, limits_by_segment):
        for name, limit in limits.items():
            peaks = seg.peaks.get(name)
            if peaks is None:
                continue
            ran = seg.steps > 0
            over = ran & (peaks > limit)
            if np.any(ran):
                rows.append(
                    {
                        "skill": seg.skill_ref,
                        "limit": name,
                        "declared": float(limit),
                        "worst": float(np.max(peaks[ran])),
                        "episodes_over": int(np.sum(over)),
                        "episodes": int(np.sum(ran)),
                    }
                )
    return rows


def summarize_rollout(rollout: ChainRollout, *, confidence: float = 0.95) -> dict[str, Any]:
    """Successes with a Clopper-Pearson interval, duration quantiles (steps), returns and outcomes."""
    from ..checker.stats import clopper_pearson

    n = rollout.n_episodes
    k = int(np.sum(rollout.success))
    low, high = clopper_pearson(k, n, confidence)
    duration = rollout.total_steps.astype(np.float64)
    ret = rollout.total_reward
    disc = rollout.segments[0].discounted_return
    outcomes: dict[str, dict[str, int]] = {}
    for seg in rollout.segments:
        outcomes[seg.skill_ref] = {r.label: seg.count(r) for r in EndReason if seg.count(r)}
    return {
        "env": rollout.env_id,
        "episodes": n,
        "seed": rollout.seed,
        "successes": k,
        "success_rate": k / n if n else float("nan"),
        "success_interval": [low, high],
        "confidence": confidence,
        "duration": {
            "mean": float(np.mean(duration)),
            "p10": float(np.quantile(duration, 0.1)),
            "p50": float(np.quantile(duration, 0.5)),
            "p90": float(np.quantile(duration, 0.9)),
            "max": int(np.max(duration)),
        },
        "return": {"mean": float(np.mean(ret)), "std": float(np.std(ret)), "discounted_mean": float(np.mean(disc)), "gamma": rollout.gamma},
        "outcomes": outcomes,
    }

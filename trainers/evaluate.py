"""Before/after measurements of a skill with exploration off, on fixed start states and seed."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["SkillMetrics", "evaluate_skill"]


@dataclass(frozen=True)
class SkillMetrics:
    """How a skill did over ``episodes`` runs from the same starts.

    ``successes``: episodes that ended by ``stops_when`` (refused starts and
    timeouts count as failures); ``mean_return``: mean undiscounted task reward
    per episode; ``mean_duration``: mean env steps the skill ran;
    ``outcomes``: episodes per outcome label (``stopped``, ``timed_out``, ...).
    """

    episodes: int
    successes: int
    mean_return: float
    mean_duration: float
    outcomes: dict[str, int]

    @property
    def success_rate(self) -> float:
        return self.successes / self.episodes if self.episodes else float("nan")

    def as_dict(self) -> dict[str, Any]:
        return {
            "episodes": self.episodes,
            "successes": self.successes,
            "success_rate": self.success_rate,
            "mean_return": self.mean_return,
            "mean_duration": self.mean_duration,
            "outcomes": dict(self.outcomes),
        }


def evaluate_skill(skill: Any, rig: Any, *, start: Any = None, episodes: int, seed: int, workers: int = 1, gamma: float = 0.99) -> SkillMetrics:
    """Run a ``LoadedSkill`` with the runtime's ``run_skill`` (explore=False) from seeded starts."""
    from kinetome.library.runtime.execute import run_skill
    from kinetome.library.runtime.records import EndReason

    starts = _starts(rig, start, episodes, seed)
    rollout = run_skill(skill, rig, starts=starts, seed=seed, workers=workers, gamma=gamma, explore=False)
    seg = rollout.segments[0]
    outcomes = {EndReason(r).label: int(np.sum(seg.reason == r)) for r in np.unique(seg.reason)}
    return SkillMetrics(
        episodes=episodes,
        successes=int(np.sum(seg.reason == int(EndReason.STOPPED))),
        mean_return=float(np.mean(seg.reward)),
        mean_duration=float(np.mean(seg.steps)),
        outcomes=outcomes,
    )


def _starts(rig: Any, start: Any, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    if isinstance(start, tuple):
        qpos, qvel = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in start)
        if qpos.shape[0] == 0 or qpos.shape[0] != qvel.shape[0]:
            raise ValueError(f"start states must be matching non-empty (M, nq) and (M, nv) arrays, got {qpos.shape} and {qvel.shape}")
        pick = np.random.default_rng(seed).integers(0, qpos.shape[0], size=n)
        return qpos[pick], qvel[pick]
    from kinetome.library.runtime.starts import sample_starts

    return sample_starts(rig, start, n, seed=seed)

"""What a rollout records: per episode, per chain step, why and where each skill ended."""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np

__all__ = ["EndReason", "SegmentRecord", "ChainRollout"]


class EndReason(IntEnum):
    """Why a skill's turn in an episode ended (stored as int8 arrays)."""

    STOPPED = 0  # stops_when became true
    TIMED_OUT = 1  # max_steps reached first
    ENV_ENDED = 2  # the env ended the episode (gymnasium's `terminated`: the walker fell, ...)
    TERMINATED = 2  # old name of ENV_ENDED (an alias)
    REFUSED = 3  # the start state was outside starts_when; the skill never ran
    NOT_REACHED = 4  # an earlier skill of the chain did not stop, so this one never started

    @property
    def label(self) -> str:
        """The outcome's name in outputs: stopped, timed_out, env_ended, refused, not_reached."""
        return {0: "stopped", 1: "timed_out", 2: "env_ended", 3: "refused", 4: "not_reached"}[int(self)]


@dataclass(frozen=True, eq=False)
class SegmentRecord:
    """One chain step (one skill) across all n episodes.

    Arrays have a leading episode axis n. ``start_state``/``end_state`` are named
    state dicts (name -> (n, *shape)); rows whose reason is NOT_REACHED hold the
    state the previous skill left (start) or zeros-as-copies (end = start).
    ``steps`` counts env steps the skill ran; ``reward`` is the undiscounted
    task reward summed over them, ``discounted_return`` the sum of
    gamma^t r_t, and ``discount`` is gamma^steps.
    """

    skill_ref: str
    start_state: dict[str, np.ndarray]
    end_state: dict[str, np.ndarray]
    reason: np.ndarray  # (n,) int8 of EndReason
    steps: np.ndarray  # (n,) int64
    reward: np.ndarray  # (n,) float64
    discounted_return: np.ndarray  # (n,) float64
    discount: np.ndarray  # (n,) float64, gamma ** steps
    peaks: dict[str, np.ndarray] = field(default_factory=dict)  # limit name -> (n,) max seen

    def count(self, reason: EndReason) -> int:
        return int(np.sum(self.reason == int(reason)))

    @property
    def started(self) -> np.ndarray:
        """(n,) bool: the skill was offered a start state (it may still have refused)."""
        return self.reason != int(EndReason.NOT_REACHED)


@dataclass(frozen=True, eq=False)
class ChainRollout:
    """The result of running a chain (or one skill) for n episodes."""

    env_id: str
    seed: int
    gamma: float
    segments: tuple[SegmentRecord, ...]
    qpos_trace: np.ndarray | None = None  # (n_traced, T, nq) for filmstrips, NaN-padded
    segment_of_step: np.ndarray | None = None  # (n_traced, T) int, chain index per traced step
    meta: dict = field(default_factory=dict)

    @property
    def n_episodes(self) -> int:
        return int(self.segments[0].reason.shape[0]) if self.segments else 0

    @property
    def success(self) -> np.ndarray:
        """(n,) bool: every skill of the chain stopped by its stops_when."""
        ok = np.ones(self.n_episodes, dtype=bool)
        for seg in self.segments:
            ok &= seg.reason == int(EndReason.STOPPED)
        return ok

    @property
    def total_steps(self) -> np.ndarray:
        return np.sum([s.steps for s in self.segments], axis=0)

    @property
    def total_reward(self) -> np.ndarray:
        return np.sum([s.reward for s in self.segments], axis=0)

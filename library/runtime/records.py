"""What a rollout records: per episode, per chain step, why and where each skill ended."""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import IntEnum

import numpy as np

__all__ = ["EndReason", "SegmentRecord", "ChainRollout"]


class EndReason(IntEnum):
    """Why a skill's turn in an episode ended (stored as int8 arrays)."""

    STOPPED = 0  # stops_when became true
    TIMED_OUT = 1  # max_steps reached first (a chain continues only if the step may time out)
    ENV_ENDED = 2  # the env ended the episode (gymnasium's `terminated`: the walker fell, ...)
    TERMINATED = 2  # old name of ENV_ENDED (an alias)
    REFUSED = 3  # the start state was outside starts_when; the skill never ran
    NOT_REACHED = 4  # an earlier skill of the chain did not hand over, so this one never started

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
    first_command: np.ndarray | None = None  # (n, n_act) the controller's first command, NaN if it never acted
    last_command: np.ndarray | None = None  # (n, n_act) its last command

    def count(self, reason: EndReason) -> int:
        return int(np.sum(self.reason == int(reason)))

    @property
    def started(self) -> np.ndarray:
        """(n,) bool: the skill was offered a start state (it may still have refused)."""
        return self.reason != int(EndReason.NOT_REACHED)


def _concat_segments(segs: "list[SegmentRecord]") -> SegmentRecord:
    def cat(values: list) -> np.ndarray | None:
        return None if any(v is None for v in values) else np.concatenate(values)

    def cat_dict(dicts: list[dict]) -> dict:
        return {k: np.concatenate([d[k] for d in dicts]) for k in dicts[0]}

    commands = [s.first_command for s in segs]
    if any(c is None for c in commands) and not all(c is None for c in commands):
        width = next(c.shape[1] for c in commands if c is not None)
        fill = [np.full((s.reason.shape[0], width), np.nan) if s.first_command is None else None for s in segs]
        first = [f if c is None else c for f, c in zip(fill, commands)]
        last = [f if s.last_command is None else s.last_command for f, s in zip(fill, segs)]
    else:
        first, last = commands, [s.last_command for s in segs]
    return SegmentRecord(
        skill_ref=segs[0].skill_ref,
        start_state=cat_dict([s.start_state for s in segs]),
        end_state=cat_dict([s.end_state for s in segs]),
        reason=np.concatenate([s.reason for s in segs]),
        steps=np.concatenate([s.steps for s in segs]),
        reward=np.concatenate([s.reward for s in segs]),
        discounted_return=np.concatenate([s.discounted_return for s in segs]),
        discount=np.concatenate([s.discount for s in segs]),
        peaks=cat_dict([s.peaks for s in segs]) if segs[0].peaks else {},
        first_command=cat(first),
        last_command=cat(last),
    )


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
    episode_ids: np.ndarray | None = None  # (n,) global episode ids of the rows (None: 0..n-1)

    @property
    def n_episodes(self) -> int:
        return int(self.segments[0].reason.shape[0]) if self.segments else 0

    @staticmethod
    def concatenate(parts: "list[ChainRollout]") -> "ChainRollout":
        """Blocks of one chain's episodes, in order, as one rollout (traces are dropped)."""
        if not parts:
            raise ValueError("no rollouts to concatenate")
        first = parts[0]
        segments = tuple(
            _concat_segments([p.segments[i] for p in parts]) for i in range(len(first.segments))
        )
        ids = [p.episode_ids if p.episode_ids is not None else np.arange(p.n_episodes) for p in parts]
        return ChainRollout(first.env_id, first.seed, first.gamma, segments, meta=dict(first.meta), episode_ids=np.concatenate(ids))

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

"""Synthetic rollouts with known option models, built as the runtime records them."""

from __future__ import annotations

import numpy as np

from kinetome.library.runtime.records import ChainRollout, EndReason, SegmentRecord

__all__ = ["segment", "rollout", "geometric_segment", "discounted_constant_return"]


def discounted_constant_return(r: float, steps: np.ndarray, gamma: float) -> np.ndarray:
    """sum_{t=0}^{k-1} gamma^t r = r (1 - gamma^k) / (1 - gamma): rewards at steps 0..k-1."""
    return r * (1.0 - gamma**steps) / (1.0 - gamma)


def segment(ref: str, start: dict, end: dict, reason: np.ndarray, steps: np.ndarray, reward_per_step: np.ndarray | float, gamma: float) -> SegmentRecord:
    """A segment whose reward is a constant per step within each episode."""
    steps = np.asarray(steps, dtype=np.int64)
    r = np.broadcast_to(np.asarray(reward_per_step, dtype=np.float64), steps.shape)
    return SegmentRecord(
        skill_ref=ref,
        start_state=start,
        end_state=end,
        reason=np.asarray(reason, dtype=np.int8),
        steps=steps,
        reward=r * steps,
        discounted_return=discounted_constant_return(1.0, steps, gamma) * r,
        discount=gamma**steps.astype(np.float64),
    )


def rollout(segments: list[SegmentRecord], gamma: float, *, env_id: str = "kinetome/Test-v0", meta: dict | None = None) -> ChainRollout:
    return ChainRollout(env_id, 0, gamma, tuple(segments), meta=meta or {})


def geometric_segment(n: int, b: float, r: float, gamma: float, seed: int) -> SegmentRecord:
    """Option with constant termination probability b per step: k ~ Geometric(b), k >= 1.

    Start states are irrelevant noise (x ~ N(0, I_2)); end state y = x + 1.
    """
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 2))
    steps = rng.geometric(b, size=n)
    return segment("geo@1", {"x": x}, {"y": x + 1.0}, np.full(n, int(EndReason.STOPPED)), steps, r, gamma)

"""Start states for a batch of episodes, from an initial-states distribution or the rig's default."""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from kinetome.envs.rig import Rig

from .sim import SimBatch

__all__ = ["sample_starts", "named_state_of_states"]


def named_state_of_states(rig: Rig, qpos: np.ndarray, qvel: np.ndarray) -> dict[str, np.ndarray]:
    """Named state of candidate states, computed by MuJoCo (for box/ball start regions)."""
    qpos, qvel = np.atleast_2d(qpos), np.atleast_2d(qvel)
    sim = SimBatch(rig, qpos.shape[0])
    sim.reset(qpos, qvel)
    return sim.state()


def sample_starts(rig: Rig, start: Any, n: int, *, seed: int | Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
    """(qpos (n, nq), qvel (n, nv)), deterministic for ``seed`` (an int, or a list of ints naming a stream)."""
    rng = np.random.default_rng(seed)
    if start is None:
        return rig.start(rig.model, rng, n)
    return start.sample(rig.model, rng, n, named_state=lambda q, v: named_state_of_states(rig, q, v))

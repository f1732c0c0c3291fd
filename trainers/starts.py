"""Start states for training episodes: the rig's default, an initial-states distribution, or given rows."""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["StartSampler"]


class StartSampler:
    """Draws (qpos, qvel) start states with the trainer's own generator.

    ``start`` is None (the rig's default start), an object with
    ``sample(model, rng, n, named_state=...)`` (``envs.starts.StartDistribution``),
    or a pair of arrays (qpos (M, nq), qvel (M, nv)) whose rows are drawn uniformly.
    """

    def __init__(self, rig: Any, start: Any = None):
        self.rig = rig
        self.start = start
        if isinstance(start, tuple):
            qpos, qvel = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in start)
            if qpos.shape[0] == 0 or qpos.shape[0] != qvel.shape[0] or qpos.shape[1] != rig.model.nq or qvel.shape[1] != rig.model.nv:
                raise ValueError(
                    f"start states must be (M, nq={rig.model.nq}) and (M, nv={rig.model.nv}) arrays, "
                    f"got {qpos.shape} and {qvel.shape}"
                )
            self._rows = (qpos, qvel)
        elif start is None or hasattr(start, "sample"):
            self._rows = None
        else:
            raise TypeError(f"start must be None, an initial-states distribution or (qpos, qvel) arrays, got {type(start).__name__}")

    def sample(self, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        if self._rows is not None:
            pick = rng.integers(0, self._rows[0].shape[0], size=n)
            return self._rows[0][pick].copy(), self._rows[1][pick].copy()
        if self.start is None:
            return self.rig.start(self.rig.model, rng, n)
        return self.start.sample(self.rig.model, rng, n, named_state=self._named_state)

    def _named_state(self, qpos: np.ndarray, qvel: np.ndarray) -> dict[str, np.ndarray]:
        from kinetome.library.runtime.starts import named_state_of_states

        return named_state_of_states(self.rig, qpos, qvel)

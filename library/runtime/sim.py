"""Many simulations of one rig stepped as one batch on MuJoCo's thread pool.

``SimBatch`` reproduces ``envs.rig_env.RigEnv`` step semantics exactly
(``mujoco.batch.Batch`` is bit-identical to a loop over one MjData per
simulation at any thread count), so the batched runtime can be tested
against the plain one-env loop bit for bit.
"""

from __future__ import annotations

import mujoco
import mujoco.batch
import numpy as np

from kinetome.envs.rig import Rig, read_state

__all__ = ["SimBatch"]

_ACC = mujoco.mjtStage.mjSTAGE_ACC.value


class SimBatch:
    """``n`` simulations of ``rig`` on ``nthread`` threads (1 = caller only)."""

    def __init__(self, rig: Rig, n: int, *, nthread: int = 1):
        if n < 1:
            raise ValueError(f"batch size must be >= 1, got {n}")
        if nthread < 1:
            raise ValueError(f"nthread must be >= 1, got {nthread}")
        self.rig = rig
        self.n = n
        self._batch = mujoco.batch.Batch(rig.model, n, nthread)
        self._qpos = self._batch.bind("qpos")
        self._qvel = self._batch.bind("qvel")
        self._ctrl = self._batch.bind("ctrl")
        self._sensordata = self._batch.bind("sensordata")
        self._site_xpos = self._batch.bind("site_xpos") if rig.jacobian_sites else None
        self._low, self._high = rig.action_low, rig.action_high
        self._frame_skip = rig.frame_skip

    def reset(self, qpos: np.ndarray, qvel: np.ndarray, ids: np.ndarray | None = None) -> None:
        """Put simulations ``ids`` (default all) at (qpos, qvel), like RigEnv.set_state."""
        ids = self._ids(ids)
        self._batch.reset(ids, stage=mujoco.mjtStage.mjSTAGE_NONE.value)
        self._qpos[ids] = qpos
        self._qvel[ids] = qvel
        self._batch.forward(ids)

    def state(self, ids: np.ndarray | None = None, *, extra: tuple[str, ...] = ()) -> dict[str, np.ndarray]:
        """Named state of simulations ``ids``: name -> (len(ids), *shape).

        ``extra`` asks for on-demand quantities such as ``fingertip_jac``.
        """
        if ids is None:  # read_state copies, so the live bound arrays can go in as they are
            raw = (self._qpos, self._qvel, self._sensordata, self._ctrl)
        else:
            ids = self._ids(ids)
            raw = (self._qpos[ids], self._qvel[ids], self._sensordata[ids], self._ctrl[ids])
        values = read_state(self.rig, qpos=raw[0], qvel=raw[1], sensordata=raw[2], ctrl=raw[3])
        if extra:
            ids = self._ids(ids)
        for name in extra:
            site = self.rig.jacobian_sites.get(name.removesuffix("_jac")) if name.endswith("_jac") else None
            if site is None:
                raise KeyError(f"rig {self.rig.env_id} cannot supply {name!r}; it has Jacobians for {sorted(self.rig.jacobian_sites)}")
            values[name] = self.jacobian(site, ids)
        return values

    def clip(self, action: np.ndarray) -> np.ndarray:
        """Actions clipped to the actuator limits the model declares."""
        # ndarray.clip is np.clip without its dispatch layer: the same ufunc, the same bits
        return np.asarray(action).clip(self._low, self._high)

    def step(self, action: np.ndarray, ids: np.ndarray | None = None) -> np.ndarray:
        """Apply clipped ``action`` (len(ids), n_act) for one env step; return it."""
        action = self.clip(np.asarray(action, dtype=np.float64))
        if ids is None:  # all simulations: no id validation in mujoco.batch
            self._ctrl[:] = action
        else:
            ids = self._ids(ids)
            self._ctrl[ids] = action
        self._batch.step(ids, nstep=self._frame_skip, stage=_ACC)
        return action

    def integration_state(self) -> np.ndarray:
        """A copy of every simulation's full integration state (nsim, nstate), for checkpoints."""
        return np.array(self._batch.state, copy=True)

    def restore_integration_state(self, state: np.ndarray) -> None:
        """Put back states saved by ``integration_state`` and recompute derived fields."""
        state = np.asarray(state, dtype=np.float64)
        if state.shape != self._batch.state.shape:
            raise ValueError(f"simulation state must have shape {self._batch.state.shape}, got {state.shape}")
        self._batch.state[...] = state
        self._batch.forward()

    def jacobian(self, site: int, ids: np.ndarray) -> np.ndarray:
        """Translational Jacobian (len(ids), 3, nv) of a site at its current position."""
        body = int(self.rig.model.site_bodyid[site])
        point = self._site_xpos[ids, site]
        jacp, _ = self._batch.jac(body, point, ids)
        return jacp

    def _ids(self, ids: np.ndarray | None) -> np.ndarray:
        return np.arange(self.n) if ids is None else np.asarray(ids, dtype=np.int64)


def _qpos_of(sim: SimBatch, ids: np.ndarray) -> np.ndarray:
    """Current qpos rows (copy), for traces and filmstrips."""
    return np.array(sim._qpos[ids])

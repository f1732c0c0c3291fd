"""A gymnasium env over a rig: the plain one-env reference path.

Step semantics (the batched runtime reproduces them exactly):
reset: ``mj_resetData``, write the sampled qpos/qvel, ``mj_forward``;
step: clip the action to the actuator range, write ``ctrl``,
``mj_step(frame_skip)``, then ``mj_forward`` so that named state and sensors
describe the state the robot is in now.
"""

from __future__ import annotations

from typing import Any

import gymnasium as gym
import mujoco
import numpy as np

from .rig import Rig, read_state

__all__ = ["RigEnv"]


class RigEnv(gym.Env):
    """One simulation of a rig, with named state exposed via ``named_state()``.

    The named state after a step is kept as the next step's "before" state (it
    is the state the robot is still in), so a step reads named state once.
    Change the simulation only through ``set_state``/``reset``: writing
    ``data.qpos``/``data.qvel`` directly between steps is not seen by the
    next step's reward, and neither is editing the arrays of a returned state.
    """

    metadata = {"render_modes": ["rgb_array"], "render_fps": 50}

    def __init__(self, rig: Rig, *, render_mode: str | None = None, width: int = 320, height: int = 240):
        if render_mode not in (None, "rgb_array"):
            raise ValueError(f"render_mode must be None or 'rgb_array', got {render_mode!r}")
        self.rig = rig
        self.model = rig.model
        self.data = mujoco.MjData(rig.model)
        self.render_mode = render_mode
        self._width, self._height = width, height
        self._renderer = None
        self.metadata = {**self.metadata, "render_fps": int(round(1.0 / rig.dt))}
        self._low, self._high = rig.action_low, rig.action_high
        self._frame_skip = rig.frame_skip
        # (1, n) views of MjData's own buffers, fixed for its lifetime; read_state copies out of them.
        d = self.data
        self._raw = {"qpos": d.qpos[None], "qvel": d.qvel[None], "sensordata": d.sensordata[None], "ctrl": d.ctrl[None]}
        self._current: dict[str, np.ndarray] | None = None  # named state of data now, if already read
        low, high = self._low.astype(np.float32), self._high.astype(np.float32)
        self.action_space = gym.spaces.Box(low=low, high=high, dtype=np.float32)
        mujoco.mj_forward(self.model, self.data)
        n_obs = rig.observe(self.named_state()).shape[-1]
        self.observation_space = gym.spaces.Box(-np.inf, np.inf, shape=(n_obs,), dtype=np.float64)

    # -- state -------------------------------------------------------------
    def named_state(self) -> dict[str, np.ndarray]:
        """Current named state, batch of one: name -> (1, *shape)."""
        return read_state(self.rig, **self._raw)

    def set_state(self, qpos: np.ndarray, qvel: np.ndarray) -> None:
        """Put the robot at (qpos, qvel), as reset does after sampling."""
        self._current = None
        mujoco.mj_resetData(self.model, self.data)
        self.data.qpos[:] = qpos
        self.data.qvel[:] = qvel
        mujoco.mj_forward(self.model, self.data)

    # -- gymnasium API ------------------------------------------------------
    def reset(self, *, seed: int | None = None, options: dict[str, Any] | None = None):
        super().reset(seed=seed)
        qpos, qvel = self.rig.start(self.model, self.np_random, 1)
        self.set_state(qpos[0], qvel[0])
        state = self._current = self.named_state()
        return self._obs(state), {"named_state": state}

    def step(self, action):
        # ndarray.clip is np.clip without the dispatch layer (same ufunc, same bits)
        action = np.asarray(action, dtype=np.float64).reshape(1, -1).clip(self._low, self._high)
        before = self._current if self._current is not None else self.named_state()
        self.data.ctrl[:] = action[0]
        mujoco.mj_step(self.model, self.data, nstep=self._frame_skip)
        mujoco.mj_forward(self.model, self.data)
        after = self._current = self.named_state()
        reward, terms = self.rig.reward(before, action, after)
        terminated = bool(self.rig.terminated(after)[0])
        info = {"named_state": after, "reward_terms": {k: float(v[0]) for k, v in terms.items()}}
        return self._obs(after), float(reward[0]), terminated, False, info

    def _obs(self, state) -> np.ndarray:
        return np.asarray(self.rig.observe(state)[0], dtype=np.float64)

    def render(self):
        if self.render_mode != "rgb_array":
            return None
        if self._renderer is None:
            from .render import open_renderer

            camera = self.rig.metadata.get("camera", -1)
            self._renderer = open_renderer(self.model, width=self._width, height=self._height, camera=camera)
        return self._renderer.draw(self.data)

    def close(self):
        if self._renderer is not None:
            self._renderer.close()
            self._renderer = None

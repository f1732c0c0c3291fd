"""Start states of gymnasium's v5 MuJoCo tasks: each ``reset_model`` as ``start(model, rng, n) -> (qpos, qvel)``.

Draws come from ``rng`` in exactly the order gymnasium's ``reset_model`` makes
them, one row after another, so ``RigEnv(rig).reset(seed=s)`` lands on the same
state as ``gymnasium.make(id).reset(seed=s)``. The nominal pose is the model's
``qpos0`` (gymnasium's ``init_qpos``) and zero velocity (``init_qvel``).
``qpos_support(model)`` bounds the qpos that a start can produce, which widens
the named-state envelopes where a start lies outside a joint's range (the Ant's
ankles start at 0, outside 30..70 degrees).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["NoisyReset", "ReacherReset", "PusherReset"]


def _check_n(n: int) -> None:
    if not isinstance(n, (int, np.integer)) or n < 1:
        raise ValueError(f"number of start states must be a positive int, got {n!r}")


@dataclass(frozen=True)
class NoisyReset:
    """qpos0 + U(-s, s) per coordinate; qvel = U(-s, s), or s * N(0, 1) when ``normal_velocity``.

    Hopper, Walker2d, InvertedPendulum: uniform velocity noise; HalfCheetah and
    Ant: normal velocity noise (gymnasium's ``reset_noise_scale`` = s).
    """

    scale: float
    normal_velocity: bool = False

    def __post_init__(self) -> None:
        if not self.scale >= 0:
            raise ValueError(f"reset noise scale must be >= 0, got {self.scale}")

    def __call__(self, model, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        _check_n(n)
        qpos, qvel = np.empty((n, model.nq)), np.empty((n, model.nv))
        s = self.scale
        for i in range(n):
            qpos[i] = model.qpos0 + rng.uniform(low=-s, high=s, size=model.nq)
            if self.normal_velocity:
                qvel[i] = s * rng.standard_normal(model.nv)
            else:
                qvel[i] = rng.uniform(low=-s, high=s, size=model.nv)
        return qpos, qvel

    def qpos_support(self, model) -> tuple[np.ndarray, np.ndarray]:
        return model.qpos0 - self.scale, model.qpos0 + self.scale


@dataclass(frozen=True)
class ReacherReset:
    """Arm angles qpos0 + U(-0.1, 0.1); target uniform in the disc of ``goal_radius`` (rejection sampling).

    Velocities U(-0.005, 0.005) for the arm, 0 for the target.
    """

    qpos_scale: float = 0.1
    qvel_scale: float = 0.005
    goal_radius: float = 0.2

    def __call__(self, model, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        _check_n(n)
        qpos, qvel = np.empty((n, model.nq)), np.empty((n, model.nv))
        r = self.goal_radius
        for i in range(n):
            qpos[i] = rng.uniform(low=-self.qpos_scale, high=self.qpos_scale, size=model.nq) + model.qpos0
            while True:
                goal = rng.uniform(low=-r, high=r, size=2)
                if np.linalg.norm(goal) < r:
                    break
            qpos[i, -2:] = goal
            qvel[i] = rng.uniform(low=-self.qvel_scale, high=self.qvel_scale, size=model.nv)
            qvel[i, -2:] = 0.0
        return qpos, qvel

    def qpos_support(self, model) -> tuple[np.ndarray, np.ndarray]:
        low, high = model.qpos0 - self.qpos_scale, model.qpos0 + self.qpos_scale
        low[-2:], high[-2:] = -self.goal_radius, self.goal_radius
        return low, high


@dataclass(frozen=True)
class PusherReset:
    """Arm at qpos0; cylinder joints (obj_slidey, obj_slidex) ~ (U(-0.3, 0), U(-0.2, 0.2)), redrawn until
    farther than 0.17 from the goal joints, which stay at 0.

    Velocities U(-0.005, 0.005) for the arm, 0 for cylinder and goal.
    """

    qvel_scale: float = 0.005
    min_goal_distance: float = 0.17

    def __call__(self, model, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
        _check_n(n)
        qpos, qvel = np.empty((n, model.nq)), np.empty((n, model.nv))
        goal = np.zeros(2)
        for i in range(n):
            while True:
                cylinder = np.concatenate([rng.uniform(low=-0.3, high=0, size=1), rng.uniform(low=-0.2, high=0.2, size=1)])
                if np.linalg.norm(cylinder - goal) > self.min_goal_distance:
                    break
            qpos[i] = model.qpos0
            qpos[i, -4:-2] = cylinder
            qpos[i, -2:] = goal
            qvel[i] = rng.uniform(low=-self.qvel_scale, high=self.qvel_scale, size=model.nv)
            qvel[i, -4:] = 0.0
        return qpos, qvel

    def qpos_support(self, model) -> tuple[np.ndarray, np.ndarray]:
        low, high = model.qpos0.copy(), model.qpos0.copy()
        low[-4:-2], high[-4:-2] = (-0.3, -0.2), (0.0, 0.2)
        low[-2:], high[-2:] = 0.0, 0.0
        return low, high

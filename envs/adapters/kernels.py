"""Rewards, terminations and observations of gymnasium's v5 MuJoCo tasks, as numpy over batched named state.

Each function reproduces the default of one ``gymnasium/envs/mujoco/*_v5.py``
(weights and ranges are keyword arguments with gymnasium's defaults bound in
``robots.py``). Shapes: ``state[name]`` is ``(B, *shape)``, ``action`` is
``(B, n_act)``; rewards return ``(total (B,), {term: (B,)})`` with the terms
summing to the total; terminations return ``(B,)`` bool; observations
``(B, n_obs)`` float64. Totals add the terms in gymnasium's order, so where
the terms agree the totals agree bit for bit.

Named state is current (read after ``mj_forward``). gymnasium computes the
terms it takes from body positions or contact forces (Reacher, Pusher, Ant)
from ``mjData`` as the last substep left it, i.e. one substep stale; here the
same formulas see the current values. Terms that are functions of qpos/qvel
(x velocity from qpos, healthy ranges, controls) are identical.
"""

from __future__ import annotations

import numpy as np

from ..named_state import StateValues

__all__ = [
    "control_cost",
    "planar_forward_reward",
    "ant_reward",
    "reacher_reward",
    "pusher_reward",
    "pendulum_reward",
    "hopper_unhealthy",
    "walker_unhealthy",
    "ant_unhealthy",
    "pendulum_fallen",
    "never",
    "planar_observation",
    "ant_observation",
    "reacher_observation",
    "pusher_observation",
    "pendulum_observation",
    "contact_wrench",
]


def control_cost(action: np.ndarray, weight: float) -> np.ndarray:
    """weight * sum(action**2) per row."""
    return weight * np.sum(np.square(action), axis=-1)


# -- rewards ---------------------------------------------------------------------


def planar_forward_reward(
    before: StateValues,
    action: np.ndarray,
    after: StateValues,
    *,
    dt: float,
    forward_weight: float,
    ctrl_weight: float,
    alive_bonus: float = 0.0,
    unhealthy=None,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Hopper / Walker2d / HalfCheetah: forward x velocity from qpos[0], alive bonus while healthy, control cost.

    x velocity = (qpos_after[0] - qpos_before[0]) / dt, as gymnasium's step computes it.
    """
    x_velocity = (after["qpos"][:, 0] - before["qpos"][:, 0]) / dt
    terms = {"forward": forward_weight * x_velocity, "control": -control_cost(action, ctrl_weight)}
    if unhealthy is None:
        return terms["forward"] + terms["control"], terms
    terms["alive"] = alive_bonus * (~unhealthy(after)).astype(np.float64)
    # gymnasium's association order, (forward + alive) - cost, so the totals agree bit for bit
    return (terms["forward"] + terms["alive"]) + terms["control"], terms


def ant_reward(
    before: StateValues,
    action: np.ndarray,
    after: StateValues,
    *,
    dt: float,
    forward_weight: float,
    ctrl_weight: float,
    contact_weight: float,
    contact_range: tuple[float, float],
    alive_bonus: float,
    unhealthy,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Ant: forward x velocity of the torso, alive bonus, control and contact costs.

    gymnasium takes the torso's x from ``data.body(1).xpos`` (one substep stale)
    and the contact cost from ``data.cfrc_ext`` (stale too); here the torso x
    is qpos[0] (the free joint sits at the torso origin) and ``contact_wrench``
    is current.
    """
    x_velocity = (after["qpos"][:, 0] - before["qpos"][:, 0]) / dt
    wrench = np.clip(after["contact_wrench"], *contact_range)
    terms = {
        "forward": forward_weight * x_velocity,
        "alive": alive_bonus * (~unhealthy(after)).astype(np.float64),
        "control": -control_cost(action, ctrl_weight),
        "contact": -contact_weight * np.sum(np.square(wrench), axis=(-2, -1)),
    }
    return (terms["forward"] + terms["alive"]) + (terms["control"] + terms["contact"]), terms


def reacher_reward(
    before: StateValues, action: np.ndarray, after: StateValues, *, dist_weight: float, ctrl_weight: float
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Reacher: minus the fingertip-target distance, minus the control cost."""
    terms = {
        "distance": -dist_weight * np.linalg.norm(after["fingertip"] - after["target"], axis=-1),
        "control": -control_cost(action, ctrl_weight),
    }
    return terms["distance"] + terms["control"], terms


def pusher_reward(
    before: StateValues,
    action: np.ndarray,
    after: StateValues,
    *,
    near_weight: float,
    dist_weight: float,
    ctrl_weight: float,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Pusher: minus fingertip-object distance (near), minus object-goal distance, minus control cost."""
    terms = {
        "distance": -dist_weight * np.linalg.norm(after["object"] - after["goal"], axis=-1),
        "control": -control_cost(action, ctrl_weight),
        "near": -near_weight * np.linalg.norm(after["object"] - after["fingertip"], axis=-1),
    }
    return (terms["distance"] + terms["control"]) + terms["near"], terms


def pendulum_reward(
    before: StateValues, action: np.ndarray, after: StateValues, *, max_angle: float
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """InvertedPendulum: 1 per step while the pole stands (0 on the step it falls)."""
    terms = {"alive": (~pendulum_fallen(after, max_angle=max_angle)).astype(np.float64)}
    return terms["alive"].copy(), terms


# -- terminations ----------------------------------------------------------------


def _inside(x: np.ndarray, bounds: tuple[float, float]) -> np.ndarray:
    """Strictly inside an open interval, as gymnasium's ``min < x < max``."""
    return (bounds[0] < x) & (x < bounds[1])


def hopper_unhealthy(
    state: StateValues,
    *,
    state_range: tuple[float, float],
    z_range: tuple[float, float],
    angle_range: tuple[float, float],
) -> np.ndarray:
    """Hopper falls when qpos[2:], qvel leave state_range, or torso z / angle leave their ranges."""
    qpos, qvel = state["qpos"], state["qvel"]
    rest = np.concatenate([qpos[:, 2:], qvel], axis=1)
    healthy = _inside(rest, state_range).all(axis=1) & _inside(qpos[:, 1], z_range) & _inside(qpos[:, 2], angle_range)
    return ~healthy


def walker_unhealthy(state: StateValues, *, z_range: tuple[float, float], angle_range: tuple[float, float]) -> np.ndarray:
    """Walker2d falls when torso z (qpos[1]) or angle (qpos[2]) leave their open ranges."""
    qpos = state["qpos"]
    return ~(_inside(qpos[:, 1], z_range) & _inside(qpos[:, 2], angle_range))


def ant_unhealthy(state: StateValues, *, z_range: tuple[float, float]) -> np.ndarray:
    """Ant falls when qpos/qvel hold a non-finite value or torso z leaves the closed z_range."""
    qpos, qvel = state["qpos"], state["qvel"]
    finite = np.isfinite(qpos).all(axis=1) & np.isfinite(qvel).all(axis=1)
    z = qpos[:, 2]
    return ~(finite & (z_range[0] <= z) & (z <= z_range[1]))


def pendulum_fallen(state: StateValues, *, max_angle: float) -> np.ndarray:
    """InvertedPendulum ends when the observation is non-finite or |pole angle| > max_angle."""
    obs = pendulum_observation(state)
    return ~np.isfinite(obs).all(axis=1) | (np.abs(state["qpos"][:, 1]) > max_angle)


def never(state: StateValues) -> np.ndarray:
    """Tasks without a termination (Reacher, Pusher, HalfCheetah)."""
    return np.zeros(state["qpos"].shape[0], dtype=bool)


# -- observations ----------------------------------------------------------------


def planar_observation(state: StateValues, *, velocity_clip: float | None) -> np.ndarray:
    """qpos without x (qpos[1:]), then qvel (clipped to +-velocity_clip for Hopper and Walker2d)."""
    qvel = state["qvel"] if velocity_clip is None else np.clip(state["qvel"], -velocity_clip, velocity_clip)
    return np.concatenate([state["qpos"][:, 1:], qvel], axis=1)


def ant_observation(state: StateValues, *, contact_range: tuple[float, float]) -> np.ndarray:
    """qpos without x, y (qpos[2:]), qvel, then the clipped contact wrench of bodies 1.. (13 x 6)."""
    wrench = np.clip(state["contact_wrench"], *contact_range)
    return np.concatenate([state["qpos"][:, 2:], state["qvel"], wrench.reshape(wrench.shape[0], -1)], axis=1)


def reacher_observation(state: StateValues) -> np.ndarray:
    """cos, sin of the two arm angles, target x, y (qpos[2:]), arm velocities, (fingertip - target)[:2]."""
    qpos, qvel = state["qpos"], state["qvel"]
    theta = qpos[:, :2]
    gap = (state["fingertip"] - state["target"])[:, :2]
    return np.concatenate([np.cos(theta), np.sin(theta), qpos[:, 2:], qvel[:, :2], gap], axis=1)


def pusher_observation(state: StateValues) -> np.ndarray:
    """Arm qpos[:7], qvel[:7], then fingertip, object and goal positions."""
    return np.concatenate(
        [state["qpos"][:, :7], state["qvel"][:, :7], state["fingertip"], state["object"], state["goal"]], axis=1
    )


def pendulum_observation(state: StateValues) -> np.ndarray:
    """qpos then qvel: cart position, pole angle, cart velocity, pole angular velocity."""
    return np.concatenate([state["qpos"], state["qvel"]], axis=1)


# -- derived quantities ------------------------------------------------------------


def contact_wrench(values: StateValues) -> np.ndarray:
    """MuJoCo's ``cfrc_ext`` per body from contact-sensor values: [torque about robot COM, force] (B, n, 6).

    ``cfrc_ext`` is expressed at the subtree COM of the body's root (the torso
    for the Ant, i.e. ``robot_com``), world axes, rotation part first.
    """
    force = values["body_contact_force"]
    arm = values["body_contact_point"] - values["robot_com"][:, None, :]
    torque = values["body_contact_torque"] + np.cross(arm, force)
    return np.concatenate([torque, force], axis=-1)

"""A tiny planar point-mass rig (inline MJCF) and skills on it, for fast trainer tests."""

from __future__ import annotations

import mujoco
import numpy as np

from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.envs.rig import Rig, Source

GOAL = np.array([0.3, 0.0])

_XML = """
<mujoco model="pointmass">
  <option timestep="0.02" gravity="0 0 0"/>
  <worldbody>
    <body name="mass">
      <joint name="x" type="slide" axis="1 0 0" damping="0.5" range="-1 1" limited="true"/>
      <joint name="y" type="slide" axis="0 1 0" damping="0.5" range="-1 1" limited="true"/>
      <geom type="sphere" size="0.02" mass="0.1"/>
    </body>
  </worldbody>
  <actuator>
    <motor joint="x" ctrlrange="-1 1" ctrllimited="true" gear="0.2"/>
    <motor joint="y" ctrlrange="-1 1" ctrllimited="true" gear="0.2"/>
  </actuator>
</mujoco>
"""


def make_pointmass(*, max_episode_steps: int = 60, damping: float | None = None) -> Rig:
    spec = mujoco.MjSpec.from_string(_XML)
    if damping is not None:
        for j in spec.joints:
            j.damping = [damping, 0.0, 0.0]  # MjSpec keeps damping as a 3-vector (first entry: the dof)
    model = spec.compile()
    layout = StateLayout((
        Quantity("qpos", (2,), "m", "position of the mass", low=(-1.0, -1.0), high=(1.0, 1.0)),
        Quantity("qvel", (2,), "m/s", "velocity of the mass"),
        Quantity("target", (2,), "m", "goal position", derived=True),
    ))

    def reward(before, action, after):
        dist = np.linalg.norm(after["qpos"] - GOAL, axis=1)
        ctrl = 0.01 * np.sum(np.asarray(action) ** 2, axis=1)
        return -dist - ctrl, {"distance": -dist, "ctrl": -ctrl}

    def start(model, rng, n):
        return rng.uniform(-0.3, 0.3, size=(n, 2)), np.zeros((n, 2))

    return Rig(
        env_id="test/PointMass-v0",
        model=model,
        frame_skip=2,
        layout=layout,
        sources={"qpos": Source("qpos", (0, 1)), "qvel": Source("qvel", (0, 1))},
        derived={"target": lambda v: np.broadcast_to(GOAL, v["qpos"].shape).copy()},
        reward=reward,
        terminated=lambda s: np.zeros(len(s["qpos"]), dtype=bool),
        observe=lambda s: np.concatenate([s["qpos"], s["qvel"]], axis=1),
        start=start,
        actuated_qpos=(0, 1),
        actuated_qvel=(0, 1),
        max_episode_steps=max_episode_steps,
        metadata={"robot": "pointmass"},
    )


def linear_controller(rig: Rig, *, gain: float = 0.0, std: float = 0.3, gain_bound: float = 50.0):
    from kinetome.library.controllers import build_controller, context_from_rig

    n_in = 4
    g = np.zeros((2, n_in))
    g[0, 0] = g[1, 1] = -gain
    return build_controller(
        "linear",
        context_from_rig(rig),
        parameters={"gain": g, "reference": np.array([GOAL[0], GOAL[1], 0.0, 0.0])},
        bounds={"gain": (-gain_bound, gain_bound)},
        exploration_std=std,
    )


def reach_skill(rig: Rig, *, gain: float = 0.0, max_steps: int = 60, tol: float = 0.05, std: float = 0.3):
    """A TrainableSkill that should drive the mass to GOAL, stopping within ``tol``."""
    from kinetome.library.predicates import parse_predicate
    from kinetome.trainers.trainable import TrainableSkill

    names = rig.layout.shapes()
    return TrainableSkill(
        name="reach",
        controller=linear_controller(rig, gain=gain, std=std),
        max_steps=max_steps,
        starts_when=parse_predicate("norm(qpos - target) > 0.06", names),
        stops_when=parse_predicate(f"norm(qpos - target) < {tol}", names),
    )


def loaded_reach(rig: Rig, *, gain: float = 0.0, max_steps: int = 60, tol: float = 0.05, std: float = 0.3, name: str = "reach"):
    """The reach skill as a runtime ``LoadedSkill`` (built from a spec, as the store would)."""
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.spec import ControllerSpec, Skill

    g = np.zeros((2, 4))
    g[0, 0] = g[1, 1] = -gain
    spec = Skill(
        name=name,
        env=rig.env_id,
        controller=ControllerSpec(
            kind="linear",
            parameters={"gain": g.tolist(), "reference": [float(GOAL[0]), float(GOAL[1]), 0.0, 0.0]},
            bounds={"gain": (-50.0, 50.0)},
            exploration_std=std,
        ),
        starts_when="norm(qpos - target) > 0.06",
        stops_when=f"norm(qpos - target) < {tol}",
        max_steps=max_steps,
    )
    return skill_from_spec(spec, rig=rig)


def quick_config(**overrides):
    """A budget that trains the point mass in a couple of seconds."""
    from kinetome.trainers.config import TrainConfig

    base = dict(
        env_step_budget=16 * 32 * 12, parallel_envs=16, segment_steps=32, update_passes=4, minibatch_size=128, learning_rate=0.02,
        success_bonus=1.0, checkpoint_every=0, eval_episodes=16, critic_hidden=(32,), seed=3,
    )
    base.update(overrides)
    return TrainConfig(**base)

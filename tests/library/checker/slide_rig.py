"""A tiny two-slide rig for closed-form checks: a pushed cart and a passive tag carrying start noise.

The cart (slide joint 0, a motor) is pushed by a skill; the tag (slide joint 1, no actuator, no
contact, no gravity along its axis) keeps its initial position exactly, drawn from N(0, 1) by the
rig's default start. A skill that starts when ``qpos[1] < z`` therefore accepts the state the
cart skill hands over with probability Phi(z) (standard normal CDF), whatever the cart did.
"""

from __future__ import annotations

from pathlib import Path

import mujoco
import numpy as np

from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.envs.rig import Rig, Source, register_rig, rig_ids

SLIDE = "test/Slide-v0"

_XML = """
<mujoco model="slide">
  <option timestep="0.01" gravity="0 0 -9.81"/>
  <worldbody>
    <body name="cart">
      <joint name="cart" type="slide" axis="1 0 0" damping="1.0"/>
      <geom type="box" size="0.05 0.05 0.05" mass="1.0" contype="0" conaffinity="0"/>
    </body>
    <body name="tag" pos="0 0.5 0">
      <joint name="tag" type="slide" axis="1 0 0"/>
      <geom type="sphere" size="0.02" mass="0.1" contype="0" conaffinity="0"/>
    </body>
  </worldbody>
  <actuator>
    <motor joint="cart" ctrlrange="-5 5" ctrllimited="true"/>
  </actuator>
</mujoco>
"""


def make_slide(variant=None) -> Rig:
    model = mujoco.MjSpec.from_string(_XML).compile()
    layout = StateLayout((
        Quantity("qpos", (2,), "m", "cart and tag positions"),
        Quantity("qvel", (2,), "m/s", "cart and tag velocities"),
    ))

    def start(model, rng, n):
        qpos = np.zeros((n, 2))
        qpos[:, 1] = rng.standard_normal(n)
        return qpos, np.zeros((n, 2))

    return Rig(
        env_id=SLIDE,
        model=model,
        frame_skip=2,
        layout=layout,
        sources={"qpos": Source("qpos", (0, 1)), "qvel": Source("qvel", (0, 1))},
        reward=lambda before, action, after: (np.zeros(len(after["qpos"])), {}),
        terminated=lambda s: np.zeros(len(s["qpos"]), dtype=bool),
        observe=lambda s: np.concatenate([s["qpos"], s["qvel"]], axis=1),
        start=start,
        actuated_qpos=(0,),
        actuated_qvel=(0,),
        max_episode_steps=100,
        metadata={"robot": "slide"},
    )


if SLIDE not in rig_ids():
    register_rig(SLIDE)(make_slide)


def write_slide_chain(folder: Path, z: float, **fields) -> Path:
    """Cart push (stops once the cart moves, qvel[0] > 0.05: one step) -> hold (starts when
    qpos[1] < z, stops after one step): P(handoff) = P(whole chain) = Phi(z)."""
    from checker_testkit import write_chain

    push = folder / "slide-push.yaml"
    push.write_text(
        f"name: slide-push\nenv: {SLIDE}\ncontroller:\n  kind: joint_pd\n  parameters:\n"
        "    setpoint: [0.2]\n    kp: [40.0]\n    kd: [2.0]\n"
        "starts_when: abs(qvel[0]) < 1.0\nstops_when: qvel[0] > 0.05\nmax_steps: 40\n",
        encoding="utf-8",
    )
    hold = folder / "slide-hold.yaml"
    hold.write_text(
        f"name: slide-hold\nenv: {SLIDE}\ncontroller:\n  kind: joint_pd\n  parameters:\n"
        "    setpoint: [0.2]\n    kp: [40.0]\n    kd: [2.0]\n"
        f"starts_when: qpos[1] < {z!r}\nstops_when: abs(qvel[0]) < 100.0\nmax_steps: 5\n",
        encoding="utf-8",
    )
    return write_chain(folder, "slide", [push, hold], env=SLIDE, **fields)

"""A 1-DoF coasting cart whose success region is an interval of its start, known in closed form.

The cart (one slide joint, no damping, no friction, no contact, gravity across the slide) starts at
x0 with speed V and feels no force (the skill's gains are zero). MuJoCo's semi-implicit Euler step
then moves it by exactly DX = V * TIMESTEP * FRAME_SKIP per env step (x_k = x0 + k DX). The skill
stops when GATE_LOW <= x <= GATE_HIGH, checked after every step 1..MAX_STEPS, so it succeeds exactly
when x0 lies in [GATE_LOW - MAX_STEPS DX, GATE_HIGH - DX] (the gate is wider than DX, so the cart
cannot jump over it). Initial states: x0 ~ U(X_LOW, X_HIGH).
"""

from __future__ import annotations

from pathlib import Path

import mujoco
import numpy as np

from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.envs.rig import Rig, Source, register_rig, rig_ids

COAST = "test/Coast-v0"
TIMESTEP, FRAME_SKIP, V = 0.01, 1, 0.5
DX = V * TIMESTEP * FRAME_SKIP
GATE_LOW, GATE_HIGH, MAX_STEPS = 1.0, 1.1, 100
TRUE_LOW, TRUE_HIGH = GATE_LOW - MAX_STEPS * DX, GATE_HIGH - DX  # 0.5, 1.095
X_LOW, X_HIGH = 0.0, 2.0

_XML = f"""
<mujoco model="coast">
  <option timestep="{TIMESTEP}" gravity="0 0 -9.81"/>
  <worldbody>
    <body name="cart">
      <joint name="cart" type="slide" axis="1 0 0"/>
      <geom type="box" size="0.05 0.05 0.05" mass="1.0" contype="0" conaffinity="0"/>
    </body>
  </worldbody>
  <actuator>
    <motor joint="cart" ctrlrange="-1 1" ctrllimited="true"/>
  </actuator>
</mujoco>
"""


def true_success(x0: np.ndarray) -> np.ndarray:
    return (x0 >= TRUE_LOW) & (x0 <= TRUE_HIGH)


def true_precision(low: float, high: float) -> float:
    """P(success | low <= x0 <= high) under x0 ~ U(X_LOW, X_HIGH): overlap length / region length."""
    lo, hi = max(low, X_LOW), min(high, X_HIGH)
    overlap = max(0.0, min(hi, TRUE_HIGH) - max(lo, TRUE_LOW))
    return overlap / (hi - lo)


def make_coast(variant=None) -> Rig:
    model = mujoco.MjSpec.from_string(_XML).compile()
    layout = StateLayout((Quantity("qpos", (1,), "m", "cart position"), Quantity("qvel", (1,), "m/s", "cart velocity")))

    def start(model, rng, n):
        return rng.uniform(X_LOW, X_HIGH, size=(n, 1)), np.full((n, 1), V)

    return Rig(
        env_id=COAST, model=model, frame_skip=FRAME_SKIP, layout=layout,
        sources={"qpos": Source("qpos", (0,)), "qvel": Source("qvel", (0,))},
        reward=lambda before, action, after: (np.zeros(len(after["qpos"])), {}),
        terminated=lambda s: np.zeros(len(s["qpos"]), dtype=bool),
        observe=lambda s: np.concatenate([s["qpos"], s["qvel"]], axis=1),
        start=start, actuated_qpos=(0,), actuated_qvel=(0,), max_episode_steps=MAX_STEPS, metadata={"robot": "coast"},
    )


if COAST not in rig_ids():
    register_rig(COAST)(make_coast)


def write_coast_spec(folder: Path, *, starts_when: str = "abs(qvel[0]) < 1.0", name: str = "coast",
                     stops_when: str = f"qpos[0] >= {GATE_LOW} and qpos[0] <= {GATE_HIGH}") -> Path:
    """A zero-gain joint_pd skill on the coast rig (the cart coasts through the gate)."""
    path = folder / f"{name}.yaml"
    path.write_text(
        f"name: {name}\nenv: {COAST}\ncontroller:\n  kind: joint_pd\n  parameters:\n"
        "    setpoint: [0.0]\n    kp: [0.0]\n    kd: [0.0]\n"
        f"starts_when: {starts_when}\nstops_when: {stops_when}\nmax_steps: {MAX_STEPS}\n",
        encoding="utf-8",
    )
    return path

"""The bench arm rig (kinetome/BenchArm-v0): carry a payload from the pick area to the tray.

A three-joint planar arm in the vertical x-z plane (MJCF: assets/bench_arm.xml).
Named state comes from joints, motors and sensors added through MjSpec; the
task reward is a pure numpy function over batched named state.
"""

from __future__ import annotations

from pathlib import Path

import mujoco
import numpy as np

from .errors import EnvConfigError
from .mjcf_sensors import add_framelinvel, add_framepos, sensor_index
from .named_state import Quantity, StateLayout, StateValues
from .rig import Rig, Source, register_rig
from .starts import Noise, RigStart, StartDistribution
from .variants import TaskVariant, VariantTargets, apply_variant, resolve_variant

__all__ = [
    "ENV_ID",
    "ASSET",
    "FRAME_SKIP",
    "MAX_EPISODE_STEPS",
    "LINK_LENGTHS",
    "SHOULDER",
    "MAX_JOINT_SPEED",
    "LIMIT_MARGIN",
    "SUCCESS_RADIUS",
    "TARGETS",
    "HOME_START",
    "build_bench_arm",
    "arm_reward",
    "arm_observe",
    "arm_terminated",
]

ENV_ID = "kinetome/BenchArm-v0"
ASSET = Path(__file__).with_name("assets") / "bench_arm.xml"
FRAME_SKIP = 10  # 10 x 2 ms: 50 Hz control
MAX_EPISODE_STEPS = 250  # 5 s
LINK_LENGTHS = (0.30, 0.25, 0.10)  # m: upper arm, forearm, hand (to the fingertip)
SHOULDER = (0.0, 0.0, 0.40)  # m: shoulder pivot in the world
JOINTS = ("shoulder", "elbow", "wrist")
# Declared maximum joint speeds of the bench arm (the demo's datasheet value,
# invented for the demo). MuJoCo does not enforce them: they are the operating
# envelope that skills must stay inside, and the skill lint flags controllers
# that exceed them in simulation.
MAX_JOINT_SPEED = (15.0, 15.0, 25.0)  # rad/s
# MuJoCo joint limits are soft constraints: driven into a limit at full motor
# torque a joint passes it by up to ~17 mrad (the wrist; measured in
# tests/envs/test_bench_arm.py), so the qpos envelope is the joint range
# widened by this margin.
LIMIT_MARGIN = 0.03  # rad
SUCCESS_RADIUS = 0.02  # m: payload within 2 cm of the tray earns the bonus
EFFORT_WEIGHT = 1e-3  # per (N m)^2
BONUS = 1.0

TARGETS = VariantTargets(
    robot="bench_arm",
    payload_body="payload",
    target_site="tray",
    damped_joints=JOINTS,
)

# Default start: the home pose (fingertip on the pick site) plus +-0.02 rad
# uniform joint noise, at rest.
HOME_START = StartDistribution(
    name="arm_home",
    description="home pose over the pick site, +-0.02 rad uniform joint noise, at rest",
    pose="home",
    qpos_noise=Noise("uniform", 0.02),
)


def arm_reward(before: StateValues, action: np.ndarray, after: StateValues) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Carry the payload to the tray: -distance - 1e-3 |torque|^2, +1 within 2 cm."""
    gap = after["payload"] - after["target"]
    dist = np.sqrt(np.einsum("bi,bi->b", gap, gap))
    torque = after["torque"]
    terms = {
        "distance": -dist,
        "effort": -EFFORT_WEIGHT * np.einsum("bi,bi->b", torque, torque),
        "bonus": np.where(dist < SUCCESS_RADIUS, BONUS, 0.0),
    }
    return terms["distance"] + terms["effort"] + terms["bonus"], terms


def arm_terminated(state: StateValues) -> np.ndarray:
    """Never: the arm is bolted to the bench and cannot fall."""
    return np.zeros(np.asarray(state["qpos"]).shape[0], dtype=bool)


def arm_observe(state: StateValues) -> np.ndarray:
    """(B, 9): joint angles, joint speeds, fingertip minus tray position."""
    return np.concatenate([state["qpos"], state["qvel"], state["fingertip"] - state["target"]], axis=-1)


def _check_reachable(variant: TaskVariant) -> None:
    if variant.target_position is None:
        return
    x, y, z = variant.target_position
    reach = sum(LINK_LENGTHS)
    r = float(np.hypot(x - SHOULDER[0], z - SHOULDER[2]))
    where = variant.source or f"variant {variant.name}"
    problems = []
    if abs(y) > 1e-9:
        problems.append(f"{where}: target_position: y must be 0 for the planar bench arm, got {y:g}; set y to 0")
    if r > reach - 0.01:
        problems.append(
            f"{where}: target_position: must lie within {reach - 0.01:.2f} m of the shoulder "
            f"{list(SHOULDER)}, got {r:.3f} m away; move the tray closer"
        )
    if problems:
        raise EnvConfigError(problems)


def _layout(model: mujoco.MjModel, target: np.ndarray) -> StateLayout:
    lo = [float(model.jnt_range[model.joint(j).id][0]) - LIMIT_MARGIN for j in JOINTS]
    hi = [float(model.jnt_range[model.joint(j).id][1]) + LIMIT_MARGIN for j in JOINTS]
    vmax = np.asarray(MAX_JOINT_SPEED)
    reach = sum(LINK_LENGTHS)
    # Tip speed bound: joint i moves the tip at most qdot_i times its distance to the tip.
    lever = np.array([sum(LINK_LENGTHS[i:]) for i in range(3)])
    vtip = float(vmax @ lever)
    box_lo = (SHOULDER[0] - reach, -1e-6, SHOULDER[2] - reach)
    box_hi = (SHOULDER[0] + reach, 1e-6, SHOULDER[2] + reach)
    ctrl = model.actuator_ctrlrange
    return StateLayout(
        (
            Quantity("qpos", (3,), "rad", "generalised positions: shoulder, elbow, wrist angles (about -y; 0 = link along +x)",
                     low=tuple(lo), high=tuple(hi)),
            Quantity("qvel", (3,), "rad/s", "generalised velocities: shoulder, elbow, wrist speeds (envelope: declared max joint speed)",
                     low=tuple(-vmax), high=tuple(vmax)),
            Quantity("fingertip", (3,), "m", "fingertip position, world frame: fingertip site",
                     low=box_lo, high=box_hi, derived=True),
            Quantity("fingertip_vel", (3,), "m/s", "fingertip velocity, world frame: fingertip site",
                     low=(-vtip, -1e-6, -vtip), high=(vtip, 1e-6, vtip), derived=True),
            Quantity("payload", (3,), "m", "payload centre of mass in the world (held at the fingertip)",
                     low=box_lo, high=box_hi, derived=True),
            Quantity("target", (3,), "m", "target position, world frame: the tray site (fixed per variant)",
                     low=tuple(map(float, target)), high=tuple(map(float, target))),
            Quantity("torque", (3,), "N m", "actuator controls as applied, clipped to the ctrl range: joint torque (gear 1; "
                     "actuator_gain scales the delivered torque)",
                     low=tuple(map(float, ctrl[:, 0])), high=tuple(map(float, ctrl[:, 1]))),
        )
    )


@register_rig(ENV_ID)
def build_bench_arm(variant: TaskVariant | dict | str | Path | None = None) -> Rig:
    """The bench arm with ``variant`` (None: nominal) applied, named-state sensors added."""
    variant = resolve_variant(variant)
    _check_reachable(variant)
    spec = mujoco.MjSpec.from_file(str(ASSET))
    apply_variant(spec, variant, TARGETS)
    add_framepos(spec, "fingertip_pos", "site", "fingertip")
    add_framelinvel(spec, "fingertip_vel", "site", "fingertip")
    add_framepos(spec, "payload_pos", "body", "payload")
    add_framepos(spec, "target_pos", "site", "tray")
    model = spec.compile()

    target = model.site_pos[model.site("tray").id].copy()  # the tray site sits in the world body
    trn = model.actuator_trnid[:, 0]
    sources = {
        "qpos": Source("qpos", tuple(int(model.jnt_qposadr[model.joint(j).id]) for j in JOINTS)),
        "qvel": Source("qvel", tuple(int(model.jnt_dofadr[model.joint(j).id]) for j in JOINTS)),
        "fingertip": Source("sensordata", sensor_index(model, "fingertip_pos")),
        "fingertip_vel": Source("sensordata", sensor_index(model, "fingertip_vel")),
        "payload": Source("sensordata", sensor_index(model, "payload_pos")),
        "target": Source("sensordata", sensor_index(model, "target_pos")),
        "torque": Source("ctrl", tuple(range(model.nu))),
    }
    start = RigStart(HOME_START)
    rig = Rig(
        env_id=ENV_ID,
        model=model,
        frame_skip=FRAME_SKIP,
        layout=_layout(model, target),
        sources=sources,
        reward=arm_reward,
        terminated=arm_terminated,
        observe=arm_observe,
        start=start,
        jacobian_sites={"fingertip": int(model.site("fingertip").id)},
        actuated_qpos=tuple(int(model.jnt_qposadr[j]) for j in trn),
        actuated_qvel=tuple(int(model.jnt_dofadr[j]) for j in trn),
        variant=variant,
        max_episode_steps=MAX_EPISODE_STEPS,
        metadata={
            "robot": "bench_arm",
            "legged": False,
            "camera": "bench_view",
            "success_radius": SUCCESS_RADIUS,
            "variant_digest": variant.digest,
        },
    )
    return start.bind(rig)

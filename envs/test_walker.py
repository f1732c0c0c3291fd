"""The test walker rigs: walk at a commanded speed (TestWalker-v0) or stand still (TestWalkerStand-v0).

A planar walker with a front and a hind leg (MJCF: assets/test_walker.xml);
both tasks share the robot, its named state and its termination, and differ
in the commanded forward speed the reward tracks.
"""

from __future__ import annotations

import math
from pathlib import Path

import mujoco
import numpy as np

from .mjcf_sensors import add_contact_force, sensor_index
from .named_state import FOOT_CONTACT_MEANING, FOOT_FORCE_MEANING, Quantity, StateLayout, StateValues, foot_contact_magnitude
from .rig import Rig, Source, register_rig
from .starts import Noise, RigStart, StartDistribution
from .variants import TaskVariant, VariantTargets, apply_variant, resolve_variant

__all__ = [
    "WALK_ID",
    "STAND_ID",
    "ASSET",
    "FRAME_SKIP",
    "MAX_EPISODE_STEPS",
    "DEFAULT_SPEED",
    "LEG_JOINTS",
    "FEET",
    "STANDING_QPOS",
    "MIN_HEIGHT",
    "MAX_PITCH",
    "HEIGHT_REF",
    "MAX_JOINT_SPEED",
    "LIMIT_MARGIN",
    "STANDING_START",
    "walker_targets",
    "build_test_walker",
    "build_test_walker_stand",
    "walker_reward",
    "walker_terminated",
    "walker_observe",
]

WALK_ID = "kinetome/TestWalker-v0"
STAND_ID = "kinetome/TestWalkerStand-v0"
ASSET = Path(__file__).with_name("assets") / "test_walker.xml"
FRAME_SKIP = 10  # 10 x 2 ms: 50 Hz control
MAX_EPISODE_STEPS = 500  # 10 s
DEFAULT_SPEED = 0.5  # m/s, commanded forward speed of the walking task
LEG_JOINTS = ("front_hip", "front_knee", "hind_hip", "hind_knee")
FEET = ("front_pad", "hind_pad")  # foot pad geoms (the spheres that meet the floor)
STANDING_QPOS = (0.0, 0.4121, 0.0, -0.3, 0.6, -0.3, 0.6)  # the MJCF keyframe "standing"
# Termination: the torso is below 0.25 m above the floor (standing: 0.41 m; a
# torso on the ground: about 0.05 m) or pitched more than 0.8 rad (46 degrees).
MIN_HEIGHT = 0.25  # m
MAX_PITCH = 0.8  # rad
HEIGHT_REF = 0.38  # m: below this the reward's height term starts to cost
# Declared maximum leg joint speed (demo datasheet value, invented; not
# enforced by MuJoCo): the operating envelope for qvel.
MAX_JOINT_SPEED = 20.0  # rad/s
LIMIT_MARGIN = 0.03  # rad: MuJoCo's joint limits are soft, see envs/bench_arm.py
SPEED_WEIGHT = 1.0
PITCH_WEIGHT = 1.0
HEIGHT_WEIGHT = 5.0
CONTROL_WEIGHT = 1e-3
ALIVE = 1.0

# Default start: the standing pose, +-0.02 rad uniform noise on the leg joints,
# +-0.02 uniform noise on every velocity (m/s, rad/s).
STANDING_START = StartDistribution(
    name="walker_standing",
    description="standing keyframe, +-0.02 rad leg-joint noise, +-0.02 velocity noise",
    pose="standing",
    qpos_noise=Noise("uniform", tuple((j, 0.02) for j in LEG_JOINTS)),
    qvel_noise=Noise("uniform", 0.02),
)


def walker_targets(*, commanded: bool) -> VariantTargets:
    """What variant fields act on; ``commanded`` tasks accept ``speed_command``."""
    return VariantTargets(
        robot="test_walker",
        floor_geom="floor",
        foot_geoms=FEET,
        damped_joints=LEG_JOINTS,
        task_fields=("speed_command",) if commanded else (),
    )


def walker_reward(
    before: StateValues, action: np.ndarray, after: StateValues, *, speed_command: float
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Track the commanded speed, stay upright and high, small control cost; +1 per step alive."""
    vx = after["torso_vel"][:, 0]
    pitch, torque = after["torso_pitch"], after["torque"]
    terms = {
        "alive": np.full(vx.shape, ALIVE),
        "speed": -SPEED_WEIGHT * (vx - speed_command) ** 2,
        "upright": -PITCH_WEIGHT * pitch * pitch,
        "height": -HEIGHT_WEIGHT * np.maximum(0.0, HEIGHT_REF - after["torso_height"]),
        "control": -CONTROL_WEIGHT * np.einsum("bi,bi->b", torque, torque),
    }
    total = terms["alive"] + terms["speed"] + terms["upright"] + terms["height"] + terms["control"]
    return total, terms


def walker_terminated(state: StateValues) -> np.ndarray:
    """Fell: torso_height < 0.25 m or |torso_pitch| > 0.8 rad."""
    return (state["torso_height"] < MIN_HEIGHT) | (np.abs(state["torso_pitch"]) > MAX_PITCH)


def walker_observe(state: StateValues, *, speed_command: float, weight: float) -> np.ndarray:
    """(B, 16): height, pitch, 4 leg angles, 7 velocities, speed error, foot forces / weight."""
    return np.concatenate(
        [
            np.asarray(state["torso_height"])[:, None],
            np.asarray(state["torso_pitch"])[:, None],
            state["qpos"][:, 3:],
            state["qvel"],
            (state["torso_vel"][:, :1] - speed_command),
            state["foot_contact"] / weight,
        ],
        axis=-1,
    )


def _layout(model: mujoco.MjModel) -> StateLayout:
    inf = math.inf
    jr = [model.jnt_range[model.joint(j).id] for j in LEG_JOINTS]
    qlo = (-inf, -inf, -inf, *(float(r[0]) - LIMIT_MARGIN for r in jr))
    qhi = (inf, inf, inf, *(float(r[1]) + LIMIT_MARGIN for r in jr))
    vlo = (-inf, -inf, -inf, *([-MAX_JOINT_SPEED] * 4))
    vhi = (inf, inf, inf, *([MAX_JOINT_SPEED] * 4))
    ctrl = model.actuator_ctrlrange
    return StateLayout(
        (
            Quantity("qpos", (7,), "m, m, rad, rad x4",
                     "generalised positions: chassis_x, chassis_z, chassis_pitch, front hip, front knee, "
                     "hind hip, hind knee (inf: unbounded)", low=qlo, high=qhi),
            Quantity("qvel", (7,), "m/s, m/s, rad/s x5",
                     "generalised velocities: chassis and joint velocities (joint envelope: declared max joint speed; inf: unbounded)",
                     low=vlo, high=vhi),
            Quantity("torso_height", (), "m",
                     "height of the torso above the floor: the chassis origin, above the floor directly below it", derived=True),
            Quantity("torso_pitch", (), "rad", "torso pitch angle: chassis_pitch, about -y; positive raises the front end"),
            Quantity("torso_vel", (2,), "m/s", "torso velocity: chassis origin, forward x, vertical z (world)"),
            Quantity("foot_force", (2, 3), "N", f"{FOOT_FORCE_MEANING} (front pad, hind pad)"),
            Quantity("foot_contact", (2,), "N", f"{FOOT_CONTACT_MEANING} (front pad, hind pad)",
                     low=(0.0, 0.0), high=(inf, inf), derived=True),
            Quantity("torque", (4,), "N m", "actuator controls as applied, clipped to the ctrl range: joint torque (gear 1)",
                     low=tuple(map(float, ctrl[:, 0])), high=tuple(map(float, ctrl[:, 1]))),
        )
    )


def _build(env_id: str, variant: TaskVariant | dict | str | Path | None, *, commanded: bool) -> Rig:
    variant = resolve_variant(variant)
    spec = mujoco.MjSpec.from_file(str(ASSET))
    apply_variant(spec, variant, walker_targets(commanded=commanded))
    for pad in FEET:
        add_contact_force(spec, f"{pad}_force", pad)
    model = spec.compile()

    speed = (variant.speed_command if variant.speed_command is not None else DEFAULT_SPEED) if commanded else 0.0
    slope = math.tan(math.radians(variant.floor_slope or 0.0))
    weight = float(np.sum(model.body_mass) * np.linalg.norm(model.opt.gravity)) or 1.0
    pad_force = sensor_index(model, "front_pad_force") + sensor_index(model, "hind_pad_force")
    trn = model.actuator_trnid[:, 0]

    def torso_height(values: dict[str, np.ndarray]) -> np.ndarray:
        # The floor passes through the world origin and rises as x * tan(slope).
        return values["qpos"][:, 1] - values["qpos"][:, 0] * slope

    start = RigStart(STANDING_START)
    rig = Rig(
        env_id=env_id,
        model=model,
        frame_skip=FRAME_SKIP,
        layout=_layout(model),
        sources={
            "qpos": Source("qpos", tuple(range(model.nq))),
            "qvel": Source("qvel", tuple(range(model.nv))),
            "torso_pitch": Source("qpos", (int(model.jnt_qposadr[model.joint("chassis_pitch").id]),)),
            "torso_vel": Source("qvel", (int(model.jnt_dofadr[model.joint("chassis_x").id]),
                                         int(model.jnt_dofadr[model.joint("chassis_z").id]))),
            "foot_force": Source("sensordata", pad_force),
            "torque": Source("ctrl", tuple(range(model.nu))),
        },
        derived={"torso_height": torso_height, "foot_contact": foot_contact_magnitude},
        reward=lambda b, a, s: walker_reward(b, a, s, speed_command=speed),
        terminated=walker_terminated,
        observe=lambda s: walker_observe(s, speed_command=speed, weight=weight),
        start=start,
        actuated_qpos=tuple(int(model.jnt_qposadr[j]) for j in trn),
        actuated_qvel=tuple(int(model.jnt_dofadr[j]) for j in trn),
        variant=variant,
        max_episode_steps=MAX_EPISODE_STEPS,
        metadata={
            "robot": "test_walker",
            "legged": True,
            "camera": "side_follow",
            "speed_command": speed,
            "floor_slope_deg": float(variant.floor_slope or 0.0),
            "variant_digest": variant.digest,
        },
    )
    return start.bind(rig)


@register_rig(WALK_ID)
def build_test_walker(variant: TaskVariant | dict | str | Path | None = None) -> Rig:
    """Walk forward at ``variant.speed_command`` (default 0.5 m/s)."""
    return _build(WALK_ID, variant, commanded=True)


@register_rig(STAND_ID)
def build_test_walker_stand(variant: TaskVariant | dict | str | Path | None = None) -> Rig:
    """Stand still / halt: commanded speed 0 (no speed_command field)."""
    return _build(STAND_ID, variant, commanded=False)

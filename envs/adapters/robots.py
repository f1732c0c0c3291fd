"""The seven gymnasium v5 MuJoCo tasks as ``GymTask`` declarations (defaults from each ``*_v5.py``).

Frame skips, reset noise, reward weights and healthy ranges are the v5
constructor defaults; ``max_episode_steps`` is gymnasium's registration
(a test checks both against the installed gymnasium).
"""

from __future__ import annotations

from functools import partial

import numpy as np

from ..named_state import FOOT_CONTACT_MEANING, FOOT_FORCE_MEANING, foot_contact_magnitude
from . import kernels as k
from .gym_task import GymTask, Named
from .readings import BodyContact, BodyFrame, Coordinate, SubtreeCom
from .resets import NoisyReset, PusherReset, ReacherReset

__all__ = ["TASKS", "STALE_NOTE"]

STALE_NOTE = (
    "named state is current (read after mj_forward); gymnasium reads body positions and contact forces "
    "from mjData as the last substep left them, one substep stale"
)


def _fixed(reward):
    """Reward factory for rewards that do not need the step duration."""
    return lambda dt: reward


def _joint_state(joints: str, actuators: str, *, effort: str = "N m") -> tuple[Named, ...]:
    return (
        Named("qpos", "m or rad", f"generalised positions, gymnasium's order: {joints}", Coordinate("qpos")),
        Named("qvel", "m/s or rad/s", f"generalised velocities, same order as qpos ({joints})", Coordinate("qvel")),
        Named(
            "torque",
            f"1 (x gear = {effort})",
            f"actuator controls as applied, clipped to the ctrl range; joint effort = gear x control ({actuators})",
            Coordinate("ctrl"),
        ),
    )


def _torso_vel_xz() -> Named:
    # rootx and rootz are consecutive slide joints, so qvel[0:2] is the (forward, vertical) torso velocity.
    return Named(
        "torso_vel",
        "m/s",
        "torso velocity: torso frame, forward x, vertical z (qvel[0], qvel[1])",
        Coordinate("qvel", "rootx", components=(0, 1)),
    )


def _feet_state(feet: tuple[str, ...], feet_text: str) -> tuple[Named, ...]:
    return (
        Named(
            "foot_force",
            "N",
            f"{FOOT_FORCE_MEANING} ({feet_text})",
            BodyContact(feet),
            shape=(len(feet), 3),
            derived=True,
        ),
        Named(
            "foot_contact",
            "N",
            f"{FOOT_CONTACT_MEANING} ({feet_text})",
            derive=foot_contact_magnitude,
            shape=(len(feet),),
            derived=True,
        ),
    )


def _upright_walker_state(feet: tuple[str, ...], feet_text: str) -> tuple[Named, ...]:
    """Hopper and Walker2d: the torso frame sits at (qpos[0], qpos[1]) (rootz has ref 1.25), pitch qpos[2]."""
    return (
        Named(
            "torso_height", "m", "height of the torso above the floor: torso frame z above the floor plane (qpos[1], rootz)",
            Coordinate("qpos", "rootz"), shape=(),
        ),
        Named(
            "torso_pitch",
            "rad",
            "torso pitch angle: about +y (qpos[2], rooty); positive leans the torso top forward (+x)",
            Coordinate("qpos", "rooty"),
            shape=(),
        ),
        _torso_vel_xz(),
    ) + _feet_state(feet, feet_text)


# -- Hopper-v5, Walker2d-v5, HalfCheetah-v5 ---------------------------------------------

_HOPPER_UNHEALTHY = partial(k.hopper_unhealthy, state_range=(-100.0, 100.0), z_range=(0.7, float("inf")), angle_range=(-0.2, 0.2))
_WALKER_UNHEALTHY = partial(k.walker_unhealthy, z_range=(0.8, 2.0), angle_range=(-1.0, 1.0))


def _planar_reward(unhealthy, *, ctrl_weight: float, alive_bonus: float):
    return lambda dt: partial(
        k.planar_forward_reward,
        dt=dt,
        forward_weight=1.0,
        ctrl_weight=ctrl_weight,
        alive_bonus=alive_bonus,
        unhealthy=unhealthy,
    )


HOPPER = GymTask(
    env_id="Hopper-v5",
    asset="hopper.xml",
    frame_skip=4,
    max_episode_steps=1000,
    robot="hopper",
    legged=True,
    quantities=_joint_state("rootx, rootz, rooty, thigh, leg, foot", "thigh, leg, foot; gear 200")
    + _upright_walker_state(("foot",), "foot"),
    reward=_planar_reward(_HOPPER_UNHEALTHY, ctrl_weight=1e-3, alive_bonus=1.0),
    terminated=_HOPPER_UNHEALTHY,
    observe=partial(k.planar_observation, velocity_clip=10.0),
    start=NoisyReset(5e-3),
    camera="track",
    targets={"floor_geom": "floor", "foot_geoms": ("foot_geom",), "damped_joints": ("thigh_joint", "leg_joint", "foot_joint")},
    payload_parent="torso",
)

WALKER2D = GymTask(
    env_id="Walker2d-v5",
    asset="walker2d_v5.xml",
    frame_skip=4,
    max_episode_steps=1000,
    robot="walker2d",
    legged=True,
    quantities=_joint_state(
        "rootx, rootz, rooty, thigh, leg, foot, thigh_left, leg_left, foot_left",
        "thigh, leg, foot, thigh_left, leg_left, foot_left; gear 100",
    )
    + _upright_walker_state(("foot", "foot_left"), "right foot, left foot"),
    reward=_planar_reward(_WALKER_UNHEALTHY, ctrl_weight=1e-3, alive_bonus=1.0),
    terminated=_WALKER_UNHEALTHY,
    observe=partial(k.planar_observation, velocity_clip=10.0),
    start=NoisyReset(5e-3),
    camera="track",
    targets={
        "floor_geom": "floor",
        "foot_geoms": ("foot_geom", "foot_left_geom"),
        "damped_joints": ("thigh_joint", "leg_joint", "foot_joint", "thigh_left_joint", "leg_left_joint", "foot_left_joint"),
    },
    payload_parent="torso",
)

HALF_CHEETAH = GymTask(
    env_id="HalfCheetah-v5",
    asset="half_cheetah.xml",
    frame_skip=5,
    max_episode_steps=1000,
    robot="half_cheetah",
    legged=True,
    quantities=_joint_state(
        "rootx, rootz, rooty, bthigh, bshin, bfoot, fthigh, fshin, ffoot",
        "bthigh, bshin, bfoot, fthigh, fshin, ffoot; gears 120, 90, 60, 120, 60, 30",
    )
    + (
        Named(
            "torso_height",
            "m",
            "height of the torso above the floor: torso frame z above the floor plane (0.7 + qpos[1]; rootz has no ref offset)",
            BodyFrame("pos", "torso", (2,)),
            shape=(),
            derived=True,
        ),
        Named(
            "torso_pitch",
            "rad",
            "torso pitch angle: about +y (qpos[2], rooty); positive tips the head (+x end) down",
            Coordinate("qpos", "rooty"),
            shape=(),
        ),
        _torso_vel_xz(),
    )
    + _feet_state(("bfoot", "ffoot"), "back bfoot, front ffoot"),
    reward=_planar_reward(None, ctrl_weight=0.1, alive_bonus=0.0),
    terminated=k.never,
    observe=partial(k.planar_observation, velocity_clip=None),
    start=NoisyReset(0.1, normal_velocity=True),
    camera="track",
    targets={
        "floor_geom": "floor",
        "foot_geoms": ("bfoot", "ffoot"),
        "damped_joints": ("bthigh", "bshin", "bfoot", "fthigh", "fshin", "ffoot"),
    },
    payload_parent="torso",
)

# -- Ant-v5 -------------------------------------------------------------------------------

# Body order of ant.xml; the four lower legs are unnamed there and get the names body4, body7, body10, body13.
_ANT_BODIES = (
    "torso", "front_left_leg", "aux_1", "body4", "front_right_leg", "aux_2", "body7",
    "back_leg", "aux_3", "body10", "right_back_leg", "aux_4", "body13",
)
_ANT_FEET = (3, 6, 9, 12)  # rows of _ANT_BODIES holding the lower legs (ankle_1 .. ankle_4)
_ANT_BODY_TEXT = "bodies 1-13 of ant.xml: " + ", ".join(_ANT_BODIES) + " (body4/7/10/13 = lower legs 1-4)"
_ANT_UNHEALTHY = partial(k.ant_unhealthy, z_range=(0.2, 1.0))
_ANT_CONTACT_RANGE = (-1.0, 1.0)


def _ant_foot_contact(values) -> np.ndarray:
    return np.linalg.norm(values["body_contact_force"][:, list(_ANT_FEET)], axis=-1)


ANT = GymTask(
    env_id="Ant-v5",
    asset="ant.xml",
    frame_skip=5,
    max_episode_steps=1000,
    robot="ant",
    legged=True,
    quantities=_joint_state(
        "root free joint (x, y, z, qw, qx, qy, qz), hip_1, ankle_1, hip_2, ankle_2, hip_3, ankle_3, hip_4, ankle_4",
        "hip_4, ankle_4, hip_1, ankle_1, hip_2, ankle_2, hip_3, ankle_3; gear 150",
    )
    + (
        Named("torso_height", "m", "height of the torso above the floor: torso centre z above the floor plane (qpos[2])", Coordinate("qpos", "root", (2,)), shape=()),
        Named(
            "torso_orientation",
            "1",
            "torso orientation quaternion (w, x, y, z), world frame (qpos[3:7])",
            Coordinate("qpos", "root", (3, 4, 5, 6)),
        ),
        Named(
            "torso_vel",
            "m/s",
            "torso velocity: torso centre, world axes x, y, z (qvel[0:3])",
            Coordinate("qvel", "root", (0, 1, 2)),
        ),
        Named("robot_com", "m", "centre of mass of the whole ant, world frame", SubtreeCom("torso"), derived=True),
        Named(
            "body_contact_force",
            "N",
            f"net contact force on each body, world axes; {_ANT_BODY_TEXT}",
            BodyContact(_ANT_BODIES, "force"),
            shape=(13, 3),
            derived=True,
        ),
        Named(
            "body_contact_torque",
            "N m",
            "net contact torque on each body about its body_contact_point, world axes",
            BodyContact(_ANT_BODIES, "torque"),
            shape=(13, 3),
            derived=True,
        ),
        Named(
            "body_contact_point",
            "m",
            "centroid of each body's contacts weighted by contact force norm, world frame; 0 without contact force",
            BodyContact(_ANT_BODIES, "point"),
            shape=(13, 3),
            derived=True,
        ),
        Named(
            "contact_wrench",
            "N m, N",
            "MuJoCo cfrc_ext of bodies 1-13: [torque about robot_com, force], world axes",
            derive=k.contact_wrench,
            shape=(13, 6),
            derived=True,
        ),
        Named(
            "foot_contact",
            "N",
            f"{FOOT_CONTACT_MEANING} (feet: lower legs 1-4, body4, body7, body10, body13)",
            derive=_ant_foot_contact,
            shape=(4,),
            derived=True,
        ),
    ),
    reward=lambda dt: partial(
        k.ant_reward,
        dt=dt,
        forward_weight=1.0,
        ctrl_weight=0.5,
        contact_weight=5e-4,
        contact_range=_ANT_CONTACT_RANGE,
        alive_bonus=1.0,
        unhealthy=_ANT_UNHEALTHY,
    ),
    terminated=_ANT_UNHEALTHY,
    observe=partial(k.ant_observation, contact_range=_ANT_CONTACT_RANGE),
    start=NoisyReset(0.1, normal_velocity=True),
    camera="track",
    targets={
        "floor_geom": "floor",
        "foot_geoms": ("left_ankle_geom", "right_ankle_geom", "third_ankle_geom", "fourth_ankle_geom"),
        "damped_joints": ("hip_1", "ankle_1", "hip_2", "ankle_2", "hip_3", "ankle_3", "hip_4", "ankle_4"),
    },
    payload_parent="torso",
    notes="forward reward, contact cost and cfrc_ext observation use current values; " + STALE_NOTE,
)

# -- Reacher-v5, Pusher-v5 ----------------------------------------------------------------

REACHER = GymTask(
    env_id="Reacher-v5",
    asset="reacher.xml",
    frame_skip=2,
    max_episode_steps=50,
    robot="reacher",
    quantities=_joint_state("joint0, joint1 (arm), target_x, target_y (target)", "joint0, joint1; gear 200")
    + (
        Named("fingertip", "m", "fingertip position, world frame: fingertip body frame", BodyFrame("pos", "fingertip"), derived=True),
        Named(
            "fingertip_vel", "m/s", "fingertip velocity, world frame: fingertip body frame linear velocity", BodyFrame("linvel", "fingertip"), derived=True
        ),
        Named("target", "m", "target position, world frame: target body frame", BodyFrame("pos", "target"), derived=True),
    ),
    reward=_fixed(partial(k.reacher_reward, dist_weight=1.0, ctrl_weight=1.0)),
    terminated=k.never,
    observe=k.reacher_observation,
    start=ReacherReset(),
    sites=("fingertip",),
    jacobian={"fingertip": "fingertip"},
    targets={"damped_joints": ("joint0", "joint1")},
    payload_parent="fingertip",
    goal=("target", ("target_x", "target_y")),
    notes="distance reward and fingertip - target observation use current positions; " + STALE_NOTE,
)

PUSHER = GymTask(
    env_id="Pusher-v5",
    asset="pusher_v5.xml",
    frame_skip=5,
    max_episode_steps=100,
    robot="pusher",
    quantities=_joint_state(
        "r_shoulder_pan, r_shoulder_lift, r_upper_arm_roll, r_elbow_flex, r_forearm_roll, r_wrist_flex, "
        "r_wrist_roll (arm), obj_slidey, obj_slidex (cylinder), goal_slidey, goal_slidex (goal)",
        "the seven arm joints in qpos order; gear 1",
    )
    + (
        Named("fingertip", "m", "fingertip position, world frame: tips_arm body frame (between the two tips)", BodyFrame("pos", "tips_arm"), derived=True),
        Named("fingertip_vel", "m/s", "fingertip velocity, world frame: tips_arm body frame linear velocity", BodyFrame("linvel", "tips_arm"), derived=True),
        Named("object", "m", "cylinder (object body) frame position, world frame", BodyFrame("pos", "object"), derived=True),
        Named("goal", "m", "goal body frame position, world frame", BodyFrame("pos", "goal"), derived=True),
    ),
    reward=_fixed(partial(k.pusher_reward, near_weight=0.5, dist_weight=1.0, ctrl_weight=0.1)),
    terminated=k.never,
    observe=k.pusher_observation,
    start=PusherReset(),
    sites=("tips_arm",),
    jacobian={"fingertip": "tips_arm"},
    targets={
        "damped_joints": (
            "r_shoulder_pan_joint", "r_shoulder_lift_joint", "r_upper_arm_roll_joint", "r_elbow_flex_joint",
            "r_forearm_roll_joint", "r_wrist_flex_joint", "r_wrist_roll_joint",
        ),
    },
    payload_parent="tips_arm",
    goal=("goal", ("goal_slidex", "goal_slidey")),
    notes="distance rewards and position observations use current positions; " + STALE_NOTE,
)

# -- InvertedPendulum-v5 --------------------------------------------------------------------

_POLE_MAX_ANGLE = 0.2

INVERTED_PENDULUM = GymTask(
    env_id="InvertedPendulum-v5",
    asset="inverted_pendulum.xml",
    frame_skip=2,
    max_episode_steps=1000,
    robot="inverted_pendulum",
    # The cart and pole coordinates are qpos/qvel entries, so they need no sensor.
    quantities=_joint_state("slider (cart), hinge (pole)", "slider; gear 100", effort="N")
    + (
        Named("cart_position", "m", "cart position along the rail, +x (qpos[0])", Coordinate("qpos", "slider"), shape=()),
        Named(
            "pole_angle",
            "rad",
            "pole angle from upright about +y (qpos[1]); positive tips the top towards +x",
            Coordinate("qpos", "hinge"),
            shape=(),
        ),
        Named("cart_velocity", "m/s", "cart velocity along the rail (qvel[0])", Coordinate("qvel", "slider"), shape=()),
        Named(
            "pole_angular_velocity",
            "rad/s",
            "pole angular velocity about +y (qvel[1])",
            Coordinate("qvel", "hinge"),
            shape=(),
        ),
    ),
    reward=_fixed(partial(k.pendulum_reward, max_angle=_POLE_MAX_ANGLE)),
    terminated=partial(k.pendulum_fallen, max_angle=_POLE_MAX_ANGLE),
    observe=k.pendulum_observation,
    start=NoisyReset(0.01),
    targets={"damped_joints": ("slider",)},
    payload_parent="pole",
)

TASKS: dict[str, GymTask] = {
    task.env_id: task for task in (REACHER, PUSHER, HOPPER, WALKER2D, HALF_CHEETAH, ANT, INVERTED_PENDULUM)
}

"""Test walker: named state vs MuJoCo's body pose, standing, walking, halting, friction."""

from __future__ import annotations

import math

import mujoco
import numpy as np
import pytest

from kinetome.envs.errors import EnvConfigError
from kinetome.envs.rig import read_state
from kinetome.envs.rig_env import RigEnv
from kinetome.envs.test_walker import (
    DEFAULT_SPEED,
    LIMIT_MARGIN,
    MAX_PITCH,
    MIN_HEIGHT,
    STANDING_QPOS,
    STANDING_START,
    build_test_walker,
    build_test_walker_stand,
    walker_reward,
)
from kinetome.envs.variants import TaskVariant

# The tuned skills (reported in the envs helper's notes).
STAND_KP, STAND_KD = 40.0, 2.0  # joint PD holding the standing pose, N m/rad and N m s/rad
STAND_Q = np.array(STANDING_QPOS[3:])
# Open-loop oscillator gait tracked by the same PD:
# q*(t) = STAND_Q + offset + amp * sin(2 pi f t + phase), joints (front hip, front knee, hind hip, hind knee).
GAIT_F = 2.9  # Hz
GAIT_AMP = np.array([0.48, 0.32, 0.48, 0.32])  # rad
GAIT_PHASE = np.array([0.0, -1.4, 4.2, 4.2 - 1.4])  # rad
GAIT_OFFSET = np.array([0.0, 0.03, 0.0, 0.03])  # rad, on top of the standing pose


def gait_target(t: float) -> np.ndarray:
    return STAND_Q + GAIT_OFFSET + GAIT_AMP * np.sin(2 * np.pi * GAIT_F * t + GAIT_PHASE)


@pytest.fixture(scope="module")
def rig():
    return build_test_walker()


def _pd(state, target):
    return STAND_KP * (target - state["qpos"][0, 3:]) - STAND_KD * state["qvel"][0, 3:]


def _run(env, seconds, target_fn, t0=0.0):
    """Step a PD tracking target_fn(t); return (forward speeds, heights, terminated at any step)."""
    vx, heights, fell = [], [], False
    for k in range(int(round(seconds / env.rig.dt))):
        s = env.named_state()
        _, _, terminated, _, info = env.step(_pd(s, target_fn(t0 + k * env.rig.dt)))
        fell |= terminated
        vx.append(float(info["named_state"]["torso_vel"][0, 0]))
        heights.append(float(info["named_state"]["torso_height"][0]))
    return np.array(vx), np.array(heights), fell


def _starts(rig, n, seed):
    qpos, qvel = STANDING_START.sample(rig.model, np.random.default_rng(seed), n)
    return [(np.array(STANDING_QPOS), np.zeros(rig.model.nv))] + list(zip(qpos, qvel))


def test_layout_and_metadata(rig):
    assert rig.layout.shapes() == {
        "qpos": (7,), "qvel": (7,), "torso_height": (), "torso_pitch": (), "torso_vel": (2,),
        "foot_force": (2, 3), "foot_contact": (2,), "torque": (4,),
    }
    lo = rig.layout["qpos"].low
    assert lo[:3] == (-math.inf,) * 3
    np.testing.assert_allclose(lo[3:], rig.model.jnt_range[3:, 0] - LIMIT_MARGIN)
    assert rig.metadata["robot"] == "test_walker" == build_test_walker_stand().metadata["robot"]
    assert rig.metadata["camera"] == "side_follow" and rig.metadata["legged"]
    assert rig.metadata["speed_command"] == DEFAULT_SPEED
    assert build_test_walker_stand().metadata["speed_command"] == 0.0
    assert rig.actuated_qpos == (3, 4, 5, 6) and rig.actuated_qvel == (3, 4, 5, 6)


def test_torso_height_and_pitch_match_mujoco_body_pose(rig):
    model = rig.model
    data = mujoco.MjData(model)
    rng = np.random.default_rng(0)
    torso = model.body("chassis").id
    for _ in range(20):
        data.qpos[:] = [rng.uniform(-2, 2), rng.uniform(0.2, 0.8), rng.uniform(-1.5, 1.5), *rng.uniform(-0.5, 0.5, 4)]
        mujoco.mj_forward(model, data)
        s = read_state(rig, qpos=data.qpos[None], qvel=data.qvel[None], sensordata=data.sensordata[None])
        # Pitch from the body's rotation matrix: the torso's forward (x) axis in the
        # world is (cos p, 0, sin p) for a rotation p about -y, so p = atan2(x_z, x_x).
        x_axis = data.xmat[torso].reshape(3, 3)[:, 0]
        assert s["torso_height"][0] == pytest.approx(data.xpos[torso, 2], abs=1e-12)
        assert s["torso_pitch"][0] == pytest.approx(math.atan2(x_axis[2], x_axis[0]), abs=1e-9)
        # And from the quaternion (w, x, y, z) of a rotation p about -y: y = -sin(p/2).
        w, _, y, _ = data.xquat[torso]
        assert s["torso_pitch"][0] == pytest.approx(-2 * math.atan2(y, w), abs=1e-9)


def test_torso_height_on_a_slope_is_height_above_the_floor():
    rig = build_test_walker("configs/variants/slope.yaml")
    model = rig.model
    data = mujoco.MjData(model)
    floor = model.geom("floor").id
    for x in (-1.0, 0.0, 2.0):
        data.qpos[:] = [x, 0.6, 0.0, *STAND_Q]
        mujoco.mj_forward(model, data)
        s = read_state(rig, qpos=data.qpos[None], qvel=data.qvel[None], sensordata=data.sensordata[None])
        # Vertical distance to the plane through geom_xpos with normal = its z axis.
        normal = data.geom_xmat[floor].reshape(3, 3)[:, 2]
        p = data.xpos[model.body("chassis").id]
        height = normal @ (p - data.geom_xpos[floor]) / normal[2]
        assert s["torso_height"][0] == pytest.approx(height, abs=1e-9)
    assert normal[0] < 0  # the floor rises toward +x (uphill forward)


def test_foot_contact_carries_the_weight_when_standing(rig):
    env = RigEnv(build_test_walker_stand())
    env.set_state(np.array(STANDING_QPOS), np.zeros(7))
    _run(env, 1.0, lambda t: STAND_Q)
    contact = env.named_state()["foot_contact"][0]
    weight = float(np.sum(rig.model.body_mass) * 9.81)
    assert np.all(contact > 0.2 * weight)
    assert contact.sum() == pytest.approx(weight, rel=0.05)  # statics: contact forces carry the weight (5%: common practice for a settling PD)
    # foot_force is the net contact force on each pad, as gymnasium adapters read their feet:
    # the same sum over mjData.contact through mj_contactForce (envs/adapters/readings.net_contact);
    # standing, only the pads touch the floor, so each lower-leg body's net force is its pad's.
    from kinetome.envs.adapters.readings import net_contact

    force = env.named_state()["foot_force"][0]
    for row, body in enumerate(("front_lower_leg", "hind_lower_leg")):
        reference, _, _ = net_contact(env.model, env.data, env.model.body(body).id)
        np.testing.assert_allclose(force[row], reference, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(contact, np.linalg.norm(force, axis=1), rtol=1e-12)
    assert force[:, 2].min() > 0  # pushed up by the floor


def test_standing_pd_holds_the_pose_for_5_seconds(rig):
    env = RigEnv(build_test_walker_stand())
    for qpos, qvel in _starts(rig, 3, seed=1):
        env.set_state(qpos, qvel)
        vx, heights, fell = _run(env, 5.0, lambda t: STAND_Q)
        assert not fell
        assert heights.min() > 0.38
        assert abs(vx[-25:].mean()) < 0.01


def test_oscillator_gait_walks_forward_without_falling(rig):
    env = RigEnv(rig)
    for qpos, qvel in _starts(rig, 3, seed=2):
        env.set_state(qpos, qvel)
        x0 = float(env.named_state()["qpos"][0, 0])
        vx, heights, fell = _run(env, 5.0, gait_target)
        x1 = float(env.named_state()["qpos"][0, 0])
        assert not fell
        assert (x1 - x0) / 5.0 > 0.4  # mean speed ~0.69 m/s measured; 0.4 leaves margin


def test_halt_after_walking_stops_without_falling(rig):
    env = RigEnv(build_test_walker_stand())
    env.set_state(np.array(STANDING_QPOS), np.zeros(7))
    vx_walk, _, fell_walk = _run(env, 4.0, gait_target)
    vx, heights, fell = _run(env, 3.0, lambda t: STAND_Q)
    assert not (fell_walk or fell)
    assert vx_walk[-50:].mean() > 0.4
    assert abs(vx[-25:].mean()) < 0.02  # last 0.5 s: halted
    assert heights[-1] > 0.38


def _drag_slip(variant) -> float:
    """How far (m) the feet slide under a 10 N forward pull on each foot for 1 s, standing PD on."""
    rig = build_test_walker_stand(variant)
    model = rig.model
    env = RigEnv(rig)
    env.set_state(np.array(STANDING_QPOS), np.zeros(7))
    _run(env, 0.5, lambda t: STAND_Q)
    feet = [model.geom(f).id for f in ("front_pad", "hind_pad")]
    x0 = env.data.geom_xpos[feet, 0].copy()
    for _ in range(int(round(1.0 / rig.dt))):
        # The pull acts at the feet (ground level), so it drags rather than tips the walker.
        env.data.qfrc_applied[:] = 0.0
        for g in feet:
            mujoco.mj_applyFT(model, env.data, np.array([10.0, 0, 0]), np.zeros(3), env.data.geom_xpos[g],
                              int(model.geom_bodyid[g]), env.data.qfrc_applied)
        env.step(_pd(env.named_state(), STAND_Q))
    return float(np.mean(env.data.geom_xpos[feet, 0] - x0))


def test_low_friction_variant_makes_the_feet_slip():
    # Coulomb friction: a 20 N pull is below mu N = 1.0 x 44 N (nominal floor) but
    # above 0.3 x 44 N = 13 N (low_friction), so only the waxed floor lets the feet slide.
    nominal = _drag_slip(None)
    slippery = _drag_slip("configs/variants/low_friction.yaml")
    # MuJoCo's soft contacts let a sticking foot creep ~1 cm (measured 1.1 cm); the
    # sliding feet go tens of cm (measured 78 cm).
    assert nominal < 0.03
    assert slippery > 0.3 and slippery > 10 * nominal


def test_termination_thresholds_and_reward_terms(rig):
    state = {
        "torso_height": np.array([0.41, MIN_HEIGHT - 0.01, 0.41, 0.30]),
        "torso_pitch": np.array([0.0, 0.0, MAX_PITCH + 0.01, -0.5]),
        "torso_vel": np.array([[0.5, 0.0], [0.0, 0.0], [0.0, 0.0], [1.0, 0.0]]),
        "torque": np.zeros((4, 4)),
    }
    np.testing.assert_array_equal(rig.terminated(state), [False, True, True, False])
    total, terms = walker_reward({}, np.zeros((4, 4)), state, speed_command=0.5)
    np.testing.assert_allclose(terms["speed"], [0.0, -0.25, -0.25, -0.25])
    np.testing.assert_allclose(terms["upright"], [0.0, 0.0, -(MAX_PITCH + 0.01) ** 2, -0.25])
    np.testing.assert_allclose(terms["height"], [0.0, -5.0 * (0.38 - MIN_HEIGHT + 0.01), 0.0, -5.0 * 0.08])
    np.testing.assert_allclose(total, sum(terms.values()))


def test_speed_command_variant_and_its_refusal_on_the_stand_task():
    fast = build_test_walker("configs/variants/fast_walk.yaml")
    assert fast.metadata["speed_command"] == 0.8
    s = {"torso_vel": np.array([[0.8, 0.0]]), "torso_pitch": np.zeros(1), "torso_height": np.full(1, 0.41),
         "torque": np.zeros((1, 4))}
    assert fast.reward({}, np.zeros((1, 4)), s)[1]["speed"][0] == 0.0
    with pytest.raises(EnvConfigError, match=r"speed_command: does not apply to robot test_walker"):
        build_test_walker_stand(TaskVariant(name="x", speed_command=0.3))

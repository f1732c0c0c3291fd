"""Rigs for gymnasium's own MuJoCo envs, checked against gymnasium itself and against MuJoCo's arrays.

Outside references used here:
- gymnasium 1.4's envs (``gymnasium.make(id)``): registration, frame skip,
  resets, rewards, terminations, observations and the documented observation
  indices in each ``gymnasium/envs/mujoco/*_v5.py`` docstring;
- MuJoCo's own arrays and functions: ``xpos``, ``cfrc_ext`` after
  ``mj_rnePostConstraint``, ``mj_jacSite``;
- planar two-link forward kinematics (any robotics textbook), finite
  differences, and static equilibrium (Newton: floor force = weight at rest).
"""

from __future__ import annotations

import functools
import warnings
from pathlib import Path

import gymnasium
import mujoco
import numpy as np
import pytest
from gymnasium.utils import seeding
from gymnasium.utils.env_checker import check_env

import kinetome.envs.adapters
from kinetome.envs import make_rig
from kinetome.envs.adapters import GYM_ENV_IDS, layout_of, layout_table, named_state_of
from kinetome.envs.adapters import kernels as k
from kinetome.envs.adapters.gym_task import GymTask, Named
from kinetome.envs.adapters.readings import BodyContact, BodyFrame, Coordinate
from kinetome.envs.adapters.resets import NoisyReset, PusherReset, ReacherReset
from kinetome.envs.adapters.robots import TASKS
from kinetome.envs.errors import EnvConfigError
from kinetome.envs.rig_env import RigEnv
from kinetome.envs.variants import NOMINAL, TaskVariant

IDS = list(GYM_ENV_IDS)
# gymnasium reads body positions / contact forces one substep stale in these envs' rewards and observations.
STALE = {"Reacher-v5", "Pusher-v5", "Ant-v5"}
EXACT = [i for i in IDS if i not in STALE]


@functools.lru_cache(maxsize=None)
def _rig(env_id: str):
    return make_rig(env_id)


def _gym(env_id: str):
    return gymnasium.make(env_id)


# Random full-range pushes topple the pendulum within 3 steps; smaller ones keep it up longer.
_ACTION_SCALE = {"InvertedPendulum-v5": 0.05}


def _actions(rig, n: int, seed: int = 0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    scale = _ACTION_SCALE.get(rig.env_id, 1.0)
    return scale * rng.uniform(rig.action_low, rig.action_high, size=(n, rig.n_act))


def _on_current(gu, fn):
    """Run a gymnasium env method on a forwarded copy of its data: current positions and contact forces."""
    current = mujoco.MjData(gu.model)
    mujoco.mj_copyData(current, gu.model, gu.data)
    mujoco.mj_forward(gu.model, current)
    mujoco.mj_rnePostConstraint(gu.model, current)
    saved = gu.data
    gu.data = current
    try:
        return fn(current)
    finally:
        gu.data = saved


# -- constants ---------------------------------------------------------------------------------


@pytest.mark.parametrize("env_id", IDS)
def test_constants_match_gymnasium(env_id):
    rig, env = _rig(env_id), _gym(env_id)
    gu = env.unwrapped
    assert rig.frame_skip == gu.frame_skip
    assert rig.model.opt.timestep == gu.model.opt.timestep
    assert rig.dt == gu.dt
    assert rig.max_episode_steps == gymnasium.spec(env_id).max_episode_steps  # gymnasium's registration
    assert (rig.model.nq, rig.model.nv, rig.model.nu) == (gu.model.nq, gu.model.nv, gu.model.nu)
    np.testing.assert_array_equal(rig.action_low.astype(np.float32), env.action_space.low)
    np.testing.assert_array_equal(rig.action_high.astype(np.float32), env.action_space.high)
    assert RigEnv(rig).observation_space.shape == env.observation_space.shape
    assert rig.metadata["robot"] == TASKS[env_id].robot
    # Sensors and sites only: the physics arrays are those gymnasium compiles.
    for name in ("body_mass", "body_inertia", "dof_damping", "jnt_range", "actuator_gear", "geom_friction", "qpos0"):
        np.testing.assert_array_equal(getattr(rig.model, name), getattr(gu.model, name), err_msg=name)


@pytest.mark.parametrize(
    ("env_id", "qpos", "qvel"),
    [
        # Actuator -> joint from each asset's <actuator> list (ant.xml drives hip_4, ankle_4, hip_1, ... in that order).
        ("Hopper-v5", (3, 4, 5), (3, 4, 5)),
        ("Ant-v5", (13, 14, 7, 8, 9, 10, 11, 12), (12, 13, 6, 7, 8, 9, 10, 11)),
        ("Reacher-v5", (0, 1), (0, 1)),
        ("InvertedPendulum-v5", (0,), (0,)),
    ],
)
def test_actuated_indices(env_id, qpos, qvel):
    rig = _rig(env_id)
    assert rig.actuated_qpos == qpos and rig.actuated_qvel == qvel


@pytest.mark.parametrize("env_id", IDS)
def test_camera_and_jacobian_sites(env_id):
    rig = _rig(env_id)
    model = rig.model
    if env_id in ("Reacher-v5", "Pusher-v5", "InvertedPendulum-v5"):
        assert rig.metadata["camera"] == -1
    else:
        assert rig.metadata["camera"] == model.camera("track").id
    assert set(rig.jacobian_sites) == ({"fingertip"} if env_id in ("Reacher-v5", "Pusher-v5") else set())


# -- resets --------------------------------------------------------------------------------------


@pytest.mark.parametrize("env_id", IDS)
@pytest.mark.parametrize("seed", [0, 7])
def test_reset_matches_gymnasium(env_id, seed):
    env, genv = RigEnv(_rig(env_id)), _gym(env_id)
    obs, info = env.reset(seed=seed)
    gobs, _ = genv.reset(seed=seed)
    gu = genv.unwrapped
    np.testing.assert_array_equal(env.data.qpos, gu.data.qpos)
    np.testing.assert_array_equal(env.data.qvel, gu.data.qvel)
    # After set_state gymnasium's data is forwarded, so even the position observations agree exactly
    # (Ant: gymnasium's cfrc_ext is still zero after reset, and the ant starts in the air).
    np.testing.assert_array_equal(obs, gobs)


@pytest.mark.parametrize("env_id", IDS)
def test_start_draws_in_gymnasium_order(env_id):
    """start(model, rng, 3) gives the three states of reset(seed), reset(), reset()."""
    rig, genv = _rig(env_id), _gym(env_id)
    rng, _ = seeding.np_random(11)  # the generator gymnasium.Env.reset(seed=11) makes
    qpos, qvel = rig.start(rig.model, rng, 3)
    for i in range(3):
        genv.reset(seed=11 if i == 0 else None)
        np.testing.assert_array_equal(qpos[i], genv.unwrapped.data.qpos)
        np.testing.assert_array_equal(qvel[i], genv.unwrapped.data.qvel)


# -- named values against documented observation indices ----------------------------------------

# (quantity expression, gymnasium observation slice) from each *_v5.py observation table.
DOCUMENTED = {
    "Reacher-v5": [
        (lambda s: np.cos(s["qpos"][0, :2]), slice(0, 2)),  # cos(joint0), cos(joint1)
        (lambda s: s["target"][0, :2], slice(4, 6)),  # target x, y
        (lambda s: (s["fingertip"] - s["target"])[0, :2], slice(8, 10)),  # fingertip - target, x and y
    ],
    "Pusher-v5": [
        (lambda s: s["fingertip"][0], slice(14, 17)),  # tips_arm x, y, z
        (lambda s: s["object"][0], slice(17, 20)),
        (lambda s: s["goal"][0], slice(20, 23)),
    ],
    "Hopper-v5": [
        (lambda s: s["torso_height"][0:1], slice(0, 1)),  # z-coordinate of the torso
        (lambda s: s["torso_pitch"][0:1], slice(1, 2)),  # angle of the torso
        (lambda s: s["torso_vel"][0], slice(5, 7)),  # x and z velocity of the torso
    ],
    "Walker2d-v5": [
        (lambda s: s["torso_height"][0:1], slice(0, 1)),
        (lambda s: s["torso_pitch"][0:1], slice(1, 2)),
        (lambda s: s["torso_vel"][0], slice(8, 10)),
    ],
    "HalfCheetah-v5": [
        # obs[0] is rootz; half_cheetah.xml puts the torso frame at z = 0.7 + rootz.
        (lambda s: s["torso_height"][0:1] - 0.7, slice(0, 1)),
        (lambda s: s["torso_pitch"][0:1], slice(1, 2)),
        (lambda s: s["torso_vel"][0], slice(8, 10)),
    ],
    "Ant-v5": [
        (lambda s: s["torso_height"][0:1], slice(0, 1)),  # z of the torso centre
        (lambda s: s["torso_orientation"][0], slice(1, 5)),  # w, x, y, z orientation
        (lambda s: s["torso_vel"][0], slice(13, 16)),  # x, y, z velocity of the torso
    ],
    "InvertedPendulum-v5": [
        (lambda s: s["cart_position"][0:1], slice(0, 1)),
        (lambda s: s["pole_angle"][0:1], slice(1, 2)),
        (lambda s: s["cart_velocity"][0:1], slice(2, 3)),
        (lambda s: s["pole_angular_velocity"][0:1], slice(3, 4)),
    ],
}


@pytest.mark.parametrize("env_id", IDS)
def test_named_state_matches_documented_observation(env_id):
    env, genv = RigEnv(_rig(env_id)), _gym(env_id)
    env.reset(seed=3)
    gobs, _ = genv.reset(seed=3)
    state = env.named_state()
    for pick, where in DOCUMENTED[env_id]:
        # 1e-15: HalfCheetah's 0.7 offset is added and removed in floating point; the rest agree exactly.
        np.testing.assert_allclose(pick(state), gobs[where], rtol=0, atol=1e-15)


def test_reacher_fingertip_is_planar_two_link_kinematics():
    """x = l1 cos q0 + l2 cos(q0 + q1), y likewise with sin (any robotics textbook); reacher.xml: l1 = 0.1, l2 = 0.11."""
    env = RigEnv(_rig("Reacher-v5"))
    rng = np.random.default_rng(5)
    for _ in range(5):
        q = np.concatenate([rng.uniform(-3, 3, 2), [0.05, -0.05]])
        env.set_state(q, np.zeros(4))
        tip = env.named_state()["fingertip"][0]
        expected = [0.1 * np.cos(q[0]) + 0.11 * np.cos(q[0] + q[1]), 0.1 * np.sin(q[0]) + 0.11 * np.sin(q[0] + q[1]), 0.01]
        np.testing.assert_allclose(tip, expected, rtol=0, atol=1e-12)
        np.testing.assert_allclose(env.named_state()["target"][0], [0.05, -0.05, 0.01], rtol=0, atol=1e-15)


@pytest.mark.parametrize("env_id", ["Reacher-v5", "Pusher-v5"])
def test_fingertip_velocity_and_jacobian_site(env_id):
    """fingertip_vel = d/dt fingertip (central difference along qvel) = J qvel with MuJoCo's site Jacobian."""
    rig = _rig(env_id)
    env = RigEnv(rig)
    env.reset(seed=2)
    for action in _actions(rig, 5):
        env.step(action)
    qpos, qvel = env.data.qpos.copy(), env.data.qvel.copy()
    state = env.named_state()
    site = rig.jacobian_sites["fingertip"]
    np.testing.assert_array_equal(env.data.site_xpos[site], state["fingertip"][0])
    jacp = np.zeros((3, rig.model.nv))
    mujoco.mj_jacSite(rig.model, env.data, jacp, None, site)
    np.testing.assert_allclose(jacp @ qvel, state["fingertip_vel"][0], rtol=0, atol=1e-12)
    # Hinge and slide joints only, so qpos moves linearly along qvel; O(eps^2) error, eps = 1e-6.
    eps = 1e-6
    data = mujoco.MjData(rig.model)
    tips = []
    for sign in (1, -1):
        data.qpos[:] = qpos + sign * eps * qvel
        mujoco.mj_kinematics(rig.model, data)
        tips.append(data.xpos[rig.model.site_bodyid[site]].copy())
    np.testing.assert_allclose((tips[0] - tips[1]) / (2 * eps), state["fingertip_vel"][0], rtol=0, atol=1e-7)


@pytest.mark.parametrize("env_id", ["Hopper-v5", "Walker2d-v5", "HalfCheetah-v5", "Ant-v5"])
def test_torso_quantities_against_mujoco_body_frame(env_id):
    """torso_height = xpos z, torso_vel = mj_objectVelocity of the torso frame, pitch from the torso's rotation matrix."""
    rig = _rig(env_id)
    env = RigEnv(rig)
    env.reset(seed=6)
    for action in _actions(rig, 8):
        env.step(action)
    state, data = env.named_state(), env.data
    torso = rig.model.body("torso").id
    velocity = np.zeros(6)
    mujoco.mj_objectVelocity(rig.model, data, mujoco.mjtObj.mjOBJ_XBODY, torso, velocity, 0)
    np.testing.assert_allclose(state["torso_height"][0], data.xpos[torso, 2], rtol=0, atol=1e-12)
    planar = env_id != "Ant-v5"
    np.testing.assert_allclose(state["torso_vel"][0], velocity[3:][[0, 2]] if planar else velocity[3:], rtol=0, atol=1e-12)
    if planar:
        # Rotation about +y by theta maps the torso's x axis to (cos theta, 0, -sin theta).
        xmat = data.xmat[torso].reshape(3, 3)
        np.testing.assert_allclose(state["torso_pitch"][0], np.arctan2(-xmat[2, 0], xmat[0, 0]), rtol=0, atol=1e-12)
    else:
        np.testing.assert_allclose(state["torso_orientation"][0], data.xquat[torso], rtol=0, atol=1e-12)


def test_ant_contact_forces_balance_weight_and_equal_cfrc_ext():
    """At rest the floor carries the ant's weight (statics), and contact_wrench is MuJoCo's cfrc_ext."""
    rig = _rig("Ant-v5")
    env = RigEnv(rig)
    env.set_state(rig.model.qpos0.copy(), np.zeros(rig.model.nv))
    assert np.all(env.named_state()["foot_contact"] == 0)  # the ant starts 0.75 m up, in the air
    for _ in range(300):
        env.step(np.zeros(rig.n_act))
    state = env.named_state()
    assert np.abs(state["qvel"]).max() < 1e-6  # settled
    weight = rig.model.body_mass.sum() * -rig.model.opt.gravity[2]
    np.testing.assert_allclose(state["body_contact_force"][0].sum(axis=0), [0, 0, weight], rtol=1e-6, atol=1e-6)
    assert np.all(state["foot_contact"] > 0)
    mujoco.mj_rnePostConstraint(rig.model, env.data)
    np.testing.assert_allclose(state["contact_wrench"][0], env.data.cfrc_ext[1:14], rtol=0, atol=1e-9)


# -- trajectories against gymnasium ---------------------------------------------------------------

STEPS = 50


def _paired_run(env_id, seed=4):
    """Step RigEnv and gymnasium with the same float64 actions; yield per-step records."""
    rig = _rig(env_id)
    env, genv = RigEnv(rig), _gym(env_id)
    env.reset(seed=seed)
    genv.reset(seed=seed)
    gu = genv.unwrapped
    for action in _actions(rig, STEPS, seed):
        before = gu.data.qpos.copy()
        obs, reward, term, _, info = env.step(action)
        gobs, greward, gterm, gtrunc, _ = genv.step(action)
        yield rig, env, genv, gu, action, before, (obs, reward, term, info), (gobs, greward, gterm)
        if term or gterm or gtrunc:
            return


@pytest.mark.parametrize("env_id", IDS)
def test_trajectory_bit_identical_to_gymnasium(env_id):
    steps = 0
    for rig, env, genv, gu, action, _, (obs, reward, term, info), (gobs, greward, gterm) in _paired_run(env_id):
        steps += 1
        # Same model physics, same integrator calls; the extra mj_forward after each step changes no state.
        np.testing.assert_array_equal(env.data.qpos, gu.data.qpos)
        np.testing.assert_array_equal(env.data.qvel, gu.data.qvel)
        assert term == gterm
        assert reward == pytest.approx(sum(info["reward_terms"].values()), rel=1e-12, abs=1e-12)
        if env_id in EXACT:
            # Rewards and observations are functions of qpos/qvel here; terms are added in gymnasium's order.
            assert reward == greward
            np.testing.assert_array_equal(obs, gobs)
    assert steps >= 5


@pytest.mark.parametrize("env_id", sorted(STALE))
def test_stale_rewards_equal_gymnasium_formula_on_current_state(env_id):
    """Reacher, Pusher, Ant: the rig computes gymnasium's reward and observation from current positions and forces.

    Reference: gymnasium's own ``_get_rew`` / ``_get_obs`` run on a forwarded copy of its data (tolerance 1e-12:
    summation order of the contact cost). The gap to gymnasium's returned values is then bounded by how far the
    bodies moved in the last substep (triangle inequality; the target and goal do not move).
    """
    for rig, env, genv, gu, action, before, (obs, reward, _, _), (gobs, greward, _) in _paired_run(env_id):
        if env_id == "Ant-v5":
            x_velocity = (gu.data.qpos[0] - before[0]) / gu.dt
            ref_reward = _on_current(gu, lambda d: gu._get_rew(x_velocity, action)[0])
        else:
            ref_reward = _on_current(gu, lambda d: gu._get_rew(action)[0])
        ref_obs = _on_current(gu, lambda d: gu._get_obs())
        assert reward == pytest.approx(ref_reward, rel=1e-12, abs=1e-12)
        np.testing.assert_allclose(obs, ref_obs, rtol=1e-12, atol=1e-12)
        stale = gu.data
        moved = _on_current(gu, lambda d: {b: np.linalg.norm(d.body(b).xpos - stale.body(b).xpos) for b in _BODIES[env_id]})
        if env_id == "Reacher-v5":
            assert abs(reward - greward) <= moved["fingertip"] + 1e-12
        elif env_id == "Pusher-v5":
            assert abs(reward - greward) <= 0.5 * (moved["object"] + moved["tips_arm"]) + moved["object"] + 1e-12


_BODIES = {"Reacher-v5": ("fingertip",), "Pusher-v5": ("object", "tips_arm"), "Ant-v5": ()}


@pytest.mark.parametrize("env_id", IDS)
def test_named_state_of_live_env_matches_rig_sensors(env_id):
    layout = layout_of(env_id)
    for rig, env, genv, gu, *_ in _paired_run(env_id):
        stale_xpos = gu.data.xpos.copy()
        live = named_state_of(genv)
        np.testing.assert_array_equal(gu.data.xpos, stale_xpos)  # the live env is left untouched
        mine = env.named_state()
        assert list(live) == list(layout.names) == list(mine)
        for name, quantity in zip(layout.names, layout):
            assert live[name].shape == (1, *quantity.shape)
            # 1e-9 N: contact forces summed in another order; positions agree to the last bit.
            np.testing.assert_allclose(live[name], mine[name], rtol=0, atol=1e-9, err_msg=name)


@pytest.mark.parametrize("env_id", IDS)
def test_layout_of_equals_rig_layout(env_id):
    assert layout_of(env_id) == _rig(env_id).layout


@pytest.mark.parametrize("env_id", IDS)
def test_readme_layout_tables_are_current(env_id):
    readme = Path(kinetome.envs.adapters.__file__).with_name("README.md").read_text(encoding="utf-8")
    assert layout_table(env_id) in readme, f"regenerate the {env_id} table in envs/adapters/README.md with layout_table"


# check_env's warnings on the adapters (gymnasium 1.4's texts), each expected: unbounded
# observation boxes (as on gymnasium's own MuJoCo envs), a RigEnv built directly has no
# spec to test other render modes with, and two envs keep gymnasium's unnormalised
# action ranges. Any other warning fails.
_ADAPTER_WARNINGS = (
    "A Box observation space maximum value is infinity",
    "A Box observation space minimum value is -infinity",
    "Not able to test alternative render modes due to the environment not having a spec",
)
_UNNORMALISED_ACTIONS = {"InvertedPendulum-v5", "Pusher-v5"}


@pytest.mark.parametrize("env_id", IDS)
def test_check_env_passes(env_id):
    from tests.envs.test_env_checker import assert_expected_warnings  # noqa: PLC0415  (one checker of warning sets)

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        check_env(RigEnv(_rig(env_id)))
    messages = [str(w.message) for w in caught]
    if env_id.split("/")[-1] in _UNNORMALISED_ACTIONS:
        messages = [m for m in messages if "For Box action spaces, we recommend" not in m]
    assert_expected_warnings(messages, _ADAPTER_WARNINGS)


# -- healthy ranges against gymnasium's is_healthy ------------------------------------------------


@pytest.mark.parametrize(
    ("env_id", "edit"),
    [
        ("Hopper-v5", {}),
        ("Hopper-v5", {"qpos": {1: 0.7}}),  # z == 0.7 is unhealthy (strict)
        ("Hopper-v5", {"qpos": {1: 0.7000001}}),
        ("Hopper-v5", {"qpos": {2: 0.2}}),
        ("Hopper-v5", {"qpos": {2: -0.1999}}),
        ("Hopper-v5", {"qvel": {4: 100.0}}),
        ("Hopper-v5", {"qvel": {4: 99.9}}),
        ("Walker2d-v5", {"qpos": {1: 2.0}}),
        ("Walker2d-v5", {"qpos": {1: 1.999}}),
        ("Walker2d-v5", {"qpos": {2: -1.0}}),
        ("Ant-v5", {"qpos": {2: 0.2}}),  # Ant's range is closed: z == 0.2 is healthy
        ("Ant-v5", {"qpos": {2: 1.0}}),
        ("Ant-v5", {"qpos": {2: 1.0000001}}),
        ("Ant-v5", {"qvel": {3: np.nan}}),
        ("InvertedPendulum-v5", {"qpos": {1: 0.2}}),
        ("InvertedPendulum-v5", {"qpos": {1: -0.2000001}}),
        ("InvertedPendulum-v5", {"qvel": {0: np.inf}}),
    ],
)
def test_termination_matches_gymnasium_healthy_checks(env_id, edit):
    rig, genv = _rig(env_id), _gym(env_id)
    gu = genv.unwrapped
    qpos, qvel = gu.init_qpos.copy(), gu.init_qvel.copy()
    for i, v in edit.get("qpos", {}).items():
        qpos[i] = v
    for i, v in edit.get("qvel", {}).items():
        qvel[i] = v
    env = RigEnv(rig)
    with np.errstate(invalid="ignore"):
        env.set_state(qpos, qvel)
        gu.set_state(qpos, qvel)
        terminated = bool(rig.terminated(env.named_state())[0])
    if env_id == "InvertedPendulum-v5":
        obs = gu._get_obs()
        expected = bool(not np.isfinite(obs).all() or (np.abs(obs[1]) > 0.2))  # InvertedPendulumEnv.step
    else:
        expected = not gu.is_healthy
    assert terminated == expected


def test_kernels_are_row_wise_on_batches():
    rig = _rig("Hopper-v5")
    env = RigEnv(rig)
    rows = []
    for seed in range(4):
        env.reset(seed=seed)
        rows.append(env.named_state())
    batch = {n: np.concatenate([r[n] for r in rows]) for n in rows[0]}
    actions = _actions(rig, 4)
    total, terms = rig.reward(batch, actions, batch)
    for i, row in enumerate(rows):
        one, _ = rig.reward(row, actions[i : i + 1], row)
        assert total[i] == one[0]
        np.testing.assert_array_equal(rig.observe(batch)[i], rig.observe(row)[0])
        assert rig.terminated(batch)[i] == rig.terminated(row)[0]


# -- variants ------------------------------------------------------------------------------------


def test_nominal_variant_keeps_gymnasium_trajectory():
    rig = make_rig("Hopper-v5", variant=NOMINAL)
    env, genv = RigEnv(rig), _gym("Hopper-v5")
    env.reset(seed=1)
    genv.reset(seed=1)
    for action in _actions(rig, 20):
        env.step(action)
        genv.step(action)
    np.testing.assert_array_equal(env.data.qpos, genv.unwrapped.data.qpos)
    assert rig.variant.name == "nominal"


@pytest.mark.parametrize("env_id", ["Hopper-v5", "Ant-v5", "Reacher-v5", "InvertedPendulum-v5"])
def test_payload_variant_adds_mass_and_changes_motion(env_id):
    nominal = _rig(env_id)
    heavy = make_rig(env_id, variant=TaskVariant(name="heavy", payload_mass=2.5))
    assert heavy.model.body_mass.sum() == pytest.approx(nominal.model.body_mass.sum() + 2.5, rel=1e-12)
    for body in range(nominal.model.nbody):  # every original body keeps its mass (the payload is a new body)
        name = nominal.model.body(body).name
        assert heavy.model.body(name).mass[0] == nominal.model.body_mass[body]
    trajectories = []
    for rig in (nominal, heavy):
        env = RigEnv(rig)
        env.reset(seed=0)
        for action in _actions(rig, 5):
            env.step(action)
        trajectories.append(env.data.qpos.copy())
    assert not np.allclose(*trajectories)
    assert heavy.layout == nominal.layout


def test_floor_and_friction_variants_reach_the_named_geoms():
    rig = make_rig("Walker2d-v5", variant=TaskVariant(name="icy_slope", friction=0.2, floor_slope=5.0))
    model = rig.model
    for geom in ("floor", "foot_geom", "foot_left_geom"):
        assert model.geom(geom).friction[0] == 0.2
    assert not np.allclose(model.geom("floor").quat, [1, 0, 0, 0])


def test_variant_from_yaml_file(tmp_path):
    path = tmp_path / "slippery.yaml"
    path.write_text("name: slippery\nfriction: 0.25\ngravity: [0, 0, -7.0]\n", encoding="utf-8")
    rig = make_rig("Hopper-v5", variant=path)
    assert rig.variant.name == "slippery" and rig.variant.digest == TaskVariant(name="slippery", friction=0.25, gravity=(0, 0, -7.0)).digest
    assert rig.model.geom("foot_geom").friction[0] == 0.25
    np.testing.assert_array_equal(rig.model.opt.gravity, [0, 0, -7.0])


def test_timestep_variant_sets_the_reward_step_duration():
    rig = make_rig("HalfCheetah-v5", variant=TaskVariant(name="fine", timestep=0.005))
    assert rig.dt == pytest.approx(5 * 0.005, rel=1e-15)
    env = RigEnv(rig)
    env.reset(seed=0)
    x0 = env.data.qpos[0]
    _, _, _, _, info = env.step(np.zeros(rig.n_act))
    assert info["reward_terms"]["forward"] == pytest.approx((env.data.qpos[0] - x0) / rig.dt, rel=1e-12)


def test_target_variant_pins_reacher_target():
    rig = make_rig("Reacher-v5", variant=TaskVariant(name="corner", target_position=(0.15, -0.05, 0.01)))
    env = RigEnv(rig)
    for seed in range(3):
        env.reset(seed=seed)
        np.testing.assert_allclose(env.named_state()["target"][0], [0.15, -0.05, 0.01], rtol=0, atol=1e-15)
    assert rig.layout["qpos"].low[2] == -0.27  # still inside the target joint range


@pytest.mark.parametrize(
    ("env_id", "variant", "error", "message"),
    [
        ("Reacher-v5", TaskVariant(name="off", target_position=(0.1, 0.1, 0.3)), ValueError, "plane the 'target' body slides in"),
        ("Hopper-v5", TaskVariant(name="t", target_position=(1, 0, 0)), EnvConfigError, "does not apply to robot hopper"),
        ("Reacher-v5", TaskVariant(name="f", friction=0.5), EnvConfigError, "no floor or foot geoms"),
        ("InvertedPendulum-v5", TaskVariant(name="s", floor_slope=3.0), EnvConfigError, "no floor geom"),
    ],
)
def test_variant_errors(env_id, variant, error, message):
    with pytest.raises(error, match=message):
        make_rig(env_id, variant=variant)


# -- readings on tiny models ------------------------------------------------------------------------

_BOX = """
<mujoco><option timestep="0.002" gravity="{g}"/>
  <worldbody><geom name="floor" type="plane" size="3 3 1" margin="0.05"/>
    <body name="box" pos="0.1 0.2 {z}" euler="0 {tilt} 0"><freejoint/><geom type="box" size=".3 .2 .1" margin="0.05"/></body>
  </worldbody></mujoco>
"""


@pytest.mark.parametrize(
    ("gravity", "z", "tilt", "vz"),
    [
        ("0 0 -9.81", 0.12, 5, 0.0),  # four corner contacts of unequal force
        ("0 0 0", 0.13, 3, 100.0),  # contacts inside the margin, separating: all forces 0, point 0
        ("0 0 -9.81", 1.0, 0, 0.0),  # no contact
    ],
)
def test_contact_reading_live_equals_sensor(gravity, z, tilt, vz):
    spec = mujoco.MjSpec.from_string(_BOX.format(g=gravity, z=z, tilt=tilt))
    parts = [BodyContact(("box",), part) for part in ("force", "torque", "point")]
    for reading in parts:
        reading.install(spec)
    model = spec.compile()
    data = mujoco.MjData(model)
    data.qvel[2] = vz
    for _ in range(60 if vz == 0 else 0):  # settle on the floor; the separating box is read where it starts
        mujoco.mj_step(model, data)
    mujoco.mj_forward(model, data)
    for reading in parts:
        from_sensor = data.sensordata[list(reading.source(model).index)]
        np.testing.assert_allclose(reading.live(model, data), from_sensor, rtol=0, atol=1e-9)
    if vz:
        assert data.ncon > 0 and np.all(data.sensordata == 0)


# -- error paths ----------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("call", "error", "message"),
    [
        (lambda: layout_of("Humanoid-v5"), KeyError, "env id must be one of"),
        (lambda: named_state_of(_gym("Hopper-v5"), env_id="Hopper-v4"), KeyError, "got 'Hopper-v4'"),
        (lambda: named_state_of(object()), TypeError, "gymnasium MuJoCo env"),
        (lambda: named_state_of(gymnasium.make("Hopper-v5").unwrapped.__class__()), ValueError, "pass env_id"),
        (lambda: named_state_of(_gym("Hopper-v5"), env_id="Walker2d-v5"), ValueError, "default asset only"),
        (lambda: make_rig("Hopper-v6"), KeyError, "did you mean 'Hopper-v5'"),
        (lambda: Coordinate("act"), ValueError, "qpos, qvel or ctrl"),
        (lambda: Coordinate("ctrl", "thigh_joint"), ValueError, "all actuators"),
        (lambda: BodyFrame("angvel", "torso"), ValueError, "'pos' or 'linvel'"),
        (lambda: BodyContact(("foot",), "impulse"), ValueError, "contact part must be one of"),
        (lambda: BodyContact(()), ValueError, "at least one body"),
        (lambda: Named("x", "m", "x", Coordinate("qpos"), derive=lambda v: v), ValueError, "exactly one of"),
        (lambda: Named("x", "m", "x", derive=lambda v: v), ValueError, "explicit shape"),
        (lambda: NoisyReset(-1.0), ValueError, "reset noise scale must be >= 0"),
        (lambda: NoisyReset(0.1)(_rig("Hopper-v5").model, np.random.default_rng(0), 0), ValueError, "positive int"),
        (lambda: ReacherReset()(_rig("Reacher-v5").model, np.random.default_rng(0), -2), ValueError, "positive int"),
        (lambda: PusherReset()(_rig("Pusher-v5").model, np.random.default_rng(0), 1.5), ValueError, "positive int"),
    ],
)
def test_error_messages(call, error, message):
    with pytest.raises(error, match=message):
        call()


def _task(**changes):
    base = dict(TASKS["Hopper-v5"].__dict__)
    base.update(changes)
    return GymTask(**base)


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        ({"quantities": TASKS["Hopper-v5"].quantities[1:]}, "must include 'qpos'"),
        ({"jacobian": {"fingertip": "foot"}}, "jacobian entry 'fingertip'"),
        ({"targets": {"floor": "floor"}}, "unknown variant target keys"),
        ({"frame_skip": 0}, "frame_skip must be >= 1"),
    ],
)
def test_task_validation(changes, message):
    with pytest.raises(ValueError, match=message):
        _task(**changes)


def test_kernel_never_and_control_cost():
    assert not k.never({"qpos": np.zeros((3, 2))}).any()
    np.testing.assert_array_equal(k.control_cost(np.array([[1.0, 2.0], [0.0, -1.0]]), 0.5), [2.5, 0.5])

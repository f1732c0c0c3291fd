"""RigEnv semantics: reset, set_state, step (clipping, frame skip, current named state), shapes vs the layout.

Outside references: MuJoCo itself (a hand-written mj_step loop on a second
MjData is the reference for step semantics; ``mj_forward`` for "current"
named state) and gymnasium's spaces API (``Box.contains``).
"""

from __future__ import annotations

import functools

import mujoco
import numpy as np
import pytest

from kinetome.envs import make_rig, read_state
from kinetome.envs.adapters import GYM_ENV_IDS
from kinetome.envs.rig_env import RigEnv


@functools.lru_cache(maxsize=None)
def _rig(env_id: str):
    return make_rig(env_id)


def _check_shapes(rig, state):
    assert list(state) == list(rig.layout.names)
    for quantity in rig.layout:
        value = state[quantity.name]
        assert value.shape == (1, *quantity.shape), quantity.name
        assert value.dtype == np.float64, quantity.name


@pytest.mark.parametrize("env_id", GYM_ENV_IDS)
def test_reset_and_step_named_state_shapes_match_layout(env_id):
    rig = _rig(env_id)
    env = RigEnv(rig)
    obs, info = env.reset(seed=0)
    env.action_space.seed(0)
    _check_shapes(rig, info["named_state"])
    assert env.observation_space.contains(obs)
    obs, reward, terminated, truncated, info = env.step(env.action_space.sample())
    _check_shapes(rig, info["named_state"])
    _check_shapes(rig, env.named_state())
    assert env.observation_space.contains(obs)
    assert isinstance(reward, float) and isinstance(terminated, bool) and truncated is False
    assert sum(info["reward_terms"].values()) == pytest.approx(reward, rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("env_id", ["Reacher-v5", "Hopper-v5"])
def test_reset_is_deterministic_per_seed(env_id):
    env = RigEnv(_rig(env_id))
    a, _ = env.reset(seed=5)
    b, _ = env.reset(seed=5)
    c, _ = env.reset(seed=6)
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)


def test_reset_clears_previous_episode():
    """mj_resetData first: time, controls and warm start from the last episode do not leak into the next."""
    rig = _rig("Hopper-v5")
    env = RigEnv(rig)
    env.reset(seed=1)
    for _ in range(10):
        env.step(np.ones(rig.n_act))
    env.reset(seed=1)
    fresh = RigEnv(rig)
    fresh.reset(seed=1)
    assert env.data.time == 0.0
    np.testing.assert_array_equal(env.data.ctrl, 0.0)
    action = np.full(rig.n_act, 0.3)
    np.testing.assert_array_equal(env.step(action)[0], fresh.step(action)[0])


def test_set_state_gives_current_named_state():
    rig = _rig("Reacher-v5")
    env = RigEnv(rig)
    qpos, qvel = np.array([0.4, -1.2, 0.1, 0.05]), np.array([1.0, -2.0, 0.0, 0.0])
    env.set_state(qpos, qvel)
    state = env.named_state()
    np.testing.assert_array_equal(state["qpos"][0], qpos)
    np.testing.assert_array_equal(state["qvel"][0], qvel)
    np.testing.assert_array_equal(state["fingertip"][0], env.data.body("fingertip").xpos)
    np.testing.assert_array_equal(state["torque"][0], 0.0)


@pytest.mark.parametrize("env_id", ["Reacher-v5", "Hopper-v5", "Ant-v5"])
def test_step_is_frame_skip_mj_steps_then_forward(env_id):
    """Reference: a plain MuJoCo loop on a second MjData (ctrl, mj_step x frame_skip, mj_forward)."""
    rig = _rig(env_id)
    env = RigEnv(rig)
    env.reset(seed=2)
    data = mujoco.MjData(rig.model)
    mujoco.mj_resetData(rig.model, data)
    data.qpos[:], data.qvel[:] = env.data.qpos, env.data.qvel
    mujoco.mj_forward(rig.model, data)
    rng = np.random.default_rng(0)
    for _ in range(10):
        action = rng.uniform(rig.action_low, rig.action_high)
        env.step(action)
        data.ctrl[:] = action
        for _ in range(rig.frame_skip):
            mujoco.mj_step(rig.model, data)
        mujoco.mj_forward(rig.model, data)
        np.testing.assert_array_equal(env.data.qpos, data.qpos)
        np.testing.assert_array_equal(env.data.qvel, data.qvel)
        np.testing.assert_array_equal(env.data.sensordata, data.sensordata)
    assert env.data.time == pytest.approx(10 * rig.dt, rel=1e-12)


def test_named_state_after_step_is_current_not_one_substep_behind():
    rig = _rig("Reacher-v5")
    env = RigEnv(rig)
    env.reset(seed=0)
    env.step(rig.action_high)
    copy = mujoco.MjData(rig.model)
    mujoco.mj_copyData(copy, rig.model, env.data)
    mujoco.mj_kinematics(rig.model, copy)  # positions of the qpos the env now holds
    np.testing.assert_array_equal(env.named_state()["fingertip"][0], copy.body("fingertip").xpos)


@pytest.mark.parametrize("env_id", ["Reacher-v5", "Hopper-v5", "InvertedPendulum-v5"])
def test_out_of_range_actions_are_clipped_to_actuator_limits(env_id):
    rig = _rig(env_id)
    wild, clipped = RigEnv(rig), RigEnv(rig)
    wild.reset(seed=3)
    clipped.reset(seed=3)
    low, high = rig.model.actuator_ctrlrange[:, 0], rig.model.actuator_ctrlrange[:, 1]
    action = np.where(np.arange(rig.n_act) % 2 == 0, 10 * high, 10 * low)  # far outside, both signs
    expected = np.clip(action, low, high)
    obs_w, reward_w, *_, info_w = wild.step(action)
    obs_c, reward_c, *_ = clipped.step(expected)
    np.testing.assert_array_equal(wild.data.ctrl, expected)
    np.testing.assert_array_equal(info_w["named_state"]["torque"][0], expected)
    np.testing.assert_array_equal(obs_w, obs_c)
    assert reward_w == reward_c  # the control cost sees the applied (clipped) action


def test_action_space_is_the_actuator_range():
    rig = _rig("Pusher-v5")
    env = RigEnv(rig)
    np.testing.assert_array_equal(env.action_space.low, rig.model.actuator_ctrlrange[:, 0].astype(np.float32))
    np.testing.assert_array_equal(env.action_space.high, rig.model.actuator_ctrlrange[:, 1].astype(np.float32))
    assert env.metadata["render_fps"] == round(1 / rig.dt)


def test_read_state_on_batches_equals_rows():
    """read_state over stacked raw arrays gives the row-wise named state (the batched runtime's view)."""
    rig = _rig("Ant-v5")
    env = RigEnv(rig)
    env.action_space.seed(1)
    raws, rows = [], []
    for seed in range(3):
        env.reset(seed=seed)
        for _ in range(20):
            env.step(env.action_space.sample())
        d = env.data
        raws.append((d.qpos.copy(), d.qvel.copy(), d.sensordata.copy(), d.ctrl.copy()))
        rows.append(env.named_state())
    stacked = read_state(rig, **{f: np.stack([r[i] for r in raws]) for i, f in enumerate(("qpos", "qvel", "sensordata", "ctrl"))})
    for i, row in enumerate(rows):
        for name in rig.layout.names:
            np.testing.assert_array_equal(stacked[name][i], row[name][0], err_msg=name)


@pytest.mark.parametrize("render_mode", ["human", "rgb"])
def test_bad_render_mode_is_refused(render_mode):
    with pytest.raises(ValueError, match="render_mode must be None or 'rgb_array'"):
        RigEnv(_rig("Reacher-v5"), render_mode=render_mode)

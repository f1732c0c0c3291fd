"""Optional critic inputs: the time remaining (time limit as part of the task) and an oscillator's phase."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from kinetome.library.controllers import build_controller, context_from_rig
from kinetome.library.runtime.learned import clock_features
from kinetome.trainers.config import config_from_mapping
from kinetome.trainers.option_critic import OptionCriticTrainer
from kinetome.trainers.trainable import TrainableSkill, flat_skill

from .pointmass import linear_controller, make_pointmass, quick_config


def test_clock_features_columns_and_refusal():
    f = clock_features(("time_remaining", "phase"), episode_step=np.array([0, 15, 30]), limit=30, phase=np.array([0.0, np.pi / 2, np.pi]))
    np.testing.assert_allclose(f, [[1.0, 0.0, 1.0], [0.5, 1.0, 0.0], [0.0, 0.0, -1.0]], atol=1e-15)
    assert clock_features((), episode_step=np.zeros(2), limit=1, phase=np.zeros(2)).shape == (2, 0)
    with pytest.raises(ValueError, match="critic inputs must be among"):
        clock_features(("speed",), episode_step=np.zeros(1), limit=1, phase=np.zeros(1))


def test_critic_inputs_setting_is_validated():
    assert config_from_mapping({"critic_inputs": ["phase"]}).critic_inputs == ("phase",)
    with pytest.raises(Exception, match="critic_inputs must be a list of distinct names"):
        config_from_mapping({"critic_inputs": ["phase", "phase"]})
    with pytest.raises(Exception, match="critic_inputs must be a list of distinct names"):
        config_from_mapping({"critic_inputs": ["clock"]})


def _constant_reward_critic(inputs):
    # Reward 1 every step, a 30-step time limit, gamma 0.9: the return still to come at step t is
    # (1 - 0.9^(30 - t)) / (1 - 0.9), 9.58 at the start and 1 on the last step (closed form).
    rig = make_pointmass(max_episode_steps=30)
    rig = dataclasses.replace(rig, reward=lambda before, action, after: (np.ones(len(after["qpos"])), {}))
    skill = flat_skill(linear_controller(rig), max_steps=30)
    cfg = quick_config(env_step_budget=16 * 32 * 12, scale_rewards=False, gamma=0.9, learning_rate=0.01,
                       update_passes=8, critic_inputs=inputs, success_bonus=0.0)
    trainer = OptionCriticTrainer([skill], rig, cfg, episode_per_skill=True)
    trainer.run()
    col = trainer.collector
    state = {k: v[:1] for k, v in col.state.items()}
    one = np.zeros(1, dtype=np.int64)
    return {t: float(col.q_values(col.features(state, (one + t, one, one + t)))[0, 0]) for t in (0, 29)}


def test_time_remaining_lets_the_critic_see_the_time_limit():
    aware = _constant_reward_critic(("time_remaining",))
    # measured (seed 3): 9.84 at the start and 1.65 on the last step after 12 updates
    assert aware[0] == pytest.approx(9.58, abs=1.0) and aware[29] == pytest.approx(1.0, abs=1.0)
    # Without it the limit is a truncation (bootstrapped): the critic learns the endless 1 / (1 - 0.9) = 10
    # everywhere, far from the 1 still to come on the last step of a limited episode.
    blind = _constant_reward_critic(())
    assert blind[29] > 6.0 and abs(blind[29] - blind[0]) < 1.5  # measured: 10.0 at both


def _phase_explained_variance(inputs):
    # A mass that cannot move (joint damping 1e6) under an oscillator tracked by PD: the action, and with
    # reward = x-action the value, follow the oscillator's phase, which the observation (qpos, qvel) cannot show.
    rig = make_pointmass(max_episode_steps=50, damping=1e6)
    rig = dataclasses.replace(rig, reward=lambda before, action, after: (np.asarray(action)[:, 0].copy(), {}))
    ctrl = build_controller("cpg", context_from_rig(rig), parameters={
        "frequency": 1.0, "amplitude": [0.8, 0.8], "phase": [0.0, 0.0], "offset": [0.0, 0.0], "kp": [1.0, 1.0], "kd": [0.0, 0.0],
    }, exploration_std=0.05)
    names = tuple(d.name for d in ctrl.declarations)
    skill = TrainableSkill(name="swing", controller=ctrl, max_steps=50, frozen=names)
    cfg = quick_config(env_step_budget=16 * 32 * 10, scale_rewards=False, gamma=0.8, learning_rate=0.01,
                       update_passes=8, critic_inputs=inputs, success_bonus=0.0, critic_hidden=(32, 32))
    trainer = OptionCriticTrainer([skill], rig, cfg, episode_per_skill=True)
    rows = trainer.run().rows
    return float(np.mean([r["explained_variance"] for r in rows[-3:]]))


def test_phase_input_lets_the_critic_follow_an_oscillator():
    with_phase = _phase_explained_variance(("phase",))
    without = _phase_explained_variance(())
    # measured (seed 3): 0.998 with the phase, 0.16 without (the phase is invisible in the state)
    assert with_phase > 0.8 and without < 0.5, (with_phase, without)

"""Flat mode reaches gymnasium's registered success level on InvertedPendulum-v5 (runs in CI, about 20 s of CPU)."""

import numpy as np
import pytest

BUDGET = 65_536  # env steps; seeds 0 and 1 reached 1000 (the maximum) with it


@pytest.mark.parametrize("seed", [0])
def test_inverted_pendulum_reaches_reward_threshold(seed):
    import gymnasium

    from kinetome.envs import make_rig
    from kinetome.library.controllers import build_controller, context_from_rig
    from kinetome.trainers import OptionCriticTrainer, TrainConfig, flat_skill

    threshold = gymnasium.spec("InvertedPendulum-v5").reward_threshold  # 950, gymnasium's registration
    rig = make_rig("InvertedPendulum-v5")
    ctrl = build_controller("mlp", context_from_rig(rig), settings={"inputs": ["qpos", "qvel"], "hidden": [64, 64]},
                            exploration_std=1.0)
    cfg = TrainConfig(env_step_budget=BUDGET, parallel_envs=16, segment_steps=128, update_passes=10, minibatch_size=256, learning_rate=3e-4,
                      gamma=0.99, lambda_=0.95, checkpoint_every=0, seed=seed)
    OptionCriticTrainer([flat_skill(ctrl, max_steps=rig.max_episode_steps)], rig, cfg, episode_per_skill=True).run()
    # Judged on gymnasium's own env (the outside reference), mean action, 10 seeded episodes.
    env = gymnasium.make("InvertedPendulum-v5")
    returns = []
    for episode in range(10):
        obs, _ = env.reset(seed=1000 + episode)
        total, done = 0.0, False
        while not done:
            action = ctrl.act({"qpos": obs[None, :2], "qvel": obs[None, 2:]}, np.zeros(1))[0]
            obs, reward, terminated, truncated, _ = env.step(action)
            total += reward
            done = terminated or truncated
        returns.append(total)
    assert np.mean(returns) >= threshold, returns

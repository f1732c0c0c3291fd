"""Flat mode on Hopper-v5: final return and wall time per seed, beside a published PPO figure.

Trains an mlp controller (inputs qpos, qvel; 64x64 tanh) for ``--budget`` env
steps per seed, then scores it on gymnasium's own Hopper-v5 (mean action, 10
seeded episodes). Reference: PPO at 1M steps on Hopper, about 2,160 in
Fujimoto, van Hoof & Meger 2018 (TD3 paper), Table 1 (from memory; older env
versions, so a rough band only). The default 1M steps x 3 seeds takes hours on
a shared 2-core machine.

    python tests/bench/bench_hopper_flat.py [--budget 1000000] [--seeds 0 1 2] [--workers 1]
"""

from __future__ import annotations

import argparse
import time

import numpy as np

PUBLISHED_PPO_1M = 2160.0  # Fujimoto et al. 2018, Table 1, PPO on Hopper (from memory)


def score(ctrl, episodes: int = 10) -> float:
    import gymnasium

    env = gymnasium.make("Hopper-v5")
    data = env.unwrapped.data
    returns = []
    for episode in range(episodes):
        env.reset(seed=10_000 + episode)
        total, done = 0.0, False
        while not done:
            action = ctrl.act({"qpos": data.qpos[None].copy(), "qvel": data.qvel[None].copy()}, np.zeros(1))[0]
            _, reward, terminated, truncated, _ = env.step(action)
            total += reward
            done = terminated or truncated
        returns.append(total)
    return float(np.mean(returns))


def run(seed: int, steps: int, workers: int) -> tuple[float, float, float]:
    from kinetome.envs import make_rig
    from kinetome.library.controllers import build_controller, context_from_rig
    from kinetome.trainers import OptionCriticTrainer, TrainConfig, flat_skill

    rig = make_rig("Hopper-v5")
    ctrl = build_controller("mlp", context_from_rig(rig),
                            settings={"inputs": ["qpos", "qvel"], "hidden": [64, 64], "init_seed": seed},
                            exploration_std=0.6)
    # Common-practice clipped-surrogate settings for MuJoCo locomotion (2048 samples per update).
    cfg = TrainConfig(env_step_budget=steps, parallel_envs=16, segment_steps=128, update_passes=10, minibatch_size=256, learning_rate=3e-4,
                      learning_rate_schedule="linear", gamma=0.99, lambda_=0.95, clip_ratio=0.2, critic_loss_weight=0.5,
                      gradient_norm_cap=0.5, checkpoint_every=0, seed=seed)
    trainer = OptionCriticTrainer([flat_skill(ctrl, max_steps=rig.max_episode_steps)], rig, cfg,
                                  episode_per_skill=True, workers=workers)
    t = time.perf_counter()
    out = trainer.run()
    wall = time.perf_counter() - t
    last = [r["return_mean"] for r in out.rows[-10:] if r["return_mean"] == r["return_mean"]]
    return score(ctrl), float(np.mean(last)) if last else float("nan"), wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=int, default=1_000_000)
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    ap.add_argument("--workers", type=int, default=1)
    a = ap.parse_args()
    print("| seed | steps | final return (gymnasium, mean action) | training return (last 10 updates) | wall s | published PPO @1M |")
    print("| --- | --- | --- | --- | --- | --- |")
    finals = []
    for seed in a.seeds:
        final, training, wall = run(seed, a.budget, a.workers)
        finals.append(final)
        print(f"| {seed} | {a.budget:,} | {final:,.0f} | {training:,.0f} | {wall:,.0f} | ~{PUBLISHED_PPO_1M:,.0f} |", flush=True)
    print(f"| mean | {a.budget:,} | {np.mean(finals):,.0f} | | | ~{PUBLISHED_PPO_1M:,.0f} |")


if __name__ == "__main__":
    main()

"""Training throughput (env steps/s, updates included) vs gymnasium's plain env.step loop.

Both run in the same process on the same env: the reference is
``gymnasium.make(env).step(constant action)`` for ``--ref-steps`` steps; the
trainer runs flat mode with an mlp controller on the batched rig. Target:
ratio >= 0.5. Prints a markdown table row.

    python tests/bench/bench_training.py [--env Hopper-v5] [--steps 32768] [--workers 1] [--blas-matvec]

``--blas-matvec`` is a what-if: it swaps the mlp kind's batch-invariant
elementwise matvec (library/controllers/kernels.py) for torch.nn.functional.linear
during this run only, to show how much of the time that kernel takes.
"""

from __future__ import annotations

import argparse
import time

import numpy as np


def gym_loop(env_id: str, steps: int) -> float:
    import gymnasium

    env = gymnasium.make(env_id)
    env.reset(seed=0)
    action = np.zeros(env.action_space.shape, dtype=env.action_space.dtype)
    t = time.perf_counter()
    for _ in range(steps):
        _, _, terminated, truncated, _ = env.step(action)
        if terminated or truncated:
            env.reset()
    return steps / (time.perf_counter() - t)


def train_loop(env_id: str, steps: int, workers: int, n_envs: int, rollout_len: int, epochs: int, minibatch: int) -> tuple[float, float]:
    from kinetome.envs import make_rig
    from kinetome.library.controllers import build_controller, context_from_rig
    from kinetome.trainers import OptionCriticTrainer, TrainConfig, flat_skill

    rig = make_rig(env_id)
    ctrl = build_controller("mlp", context_from_rig(rig), options={"inputs": ["qpos", "qvel"], "hidden": [64, 64]})
    cfg = TrainConfig(steps=steps, n_envs=n_envs, rollout_len=rollout_len, epochs=epochs, minibatch=minibatch,
                      checkpoint_every=0, seed=0)
    trainer = OptionCriticTrainer([flat_skill(ctrl, max_steps=rig.max_episode_steps)], rig, cfg,
                                  episode_per_skill=True, workers=workers)
    t = time.perf_counter()
    out = trainer.run()
    wall = time.perf_counter() - t
    return out.steps / wall, wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--env", default="Hopper-v5")
    ap.add_argument("--steps", type=int, default=32768)
    ap.add_argument("--ref-steps", type=int, default=20000)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--n-envs", type=int, default=64)
    ap.add_argument("--rollout-len", type=int, default=64)
    ap.add_argument("--epochs", type=int, default=4)
    ap.add_argument("--minibatch", type=int, default=1024)
    ap.add_argument("--blas-matvec", action="store_true")
    a = ap.parse_args()
    if a.blas_matvec:
        import torch.nn.functional as F

        import kinetome.library.controllers.mlp as mlp

        mlp.matvec = lambda x, w: F.linear(x, w)
    ref = gym_loop(a.env, a.ref_steps)
    rate, wall = train_loop(a.env, a.steps, a.workers, a.n_envs, a.rollout_len, a.epochs, a.minibatch)
    ref_after = gym_loop(a.env, a.ref_steps)  # measured again: the machine is shared
    ref_mean = 0.5 * (ref + ref_after)
    print("| env | trainer steps/s (updates incl.) | gymnasium env.step steps/s | ratio | config |")
    print("| --- | --- | --- | --- | --- |")
    print(f"| {a.env} | {rate:,.0f} | {ref_mean:,.0f} | {rate / ref_mean:.2f} | "
          f"{a.n_envs} envs x {a.rollout_len}, {a.epochs} epochs, minibatch {a.minibatch}, workers {a.workers}, {a.steps} steps"
          f"{', BLAS matvec (what-if)' if a.blas_matvec else ''} |")


if __name__ == "__main__":
    main()

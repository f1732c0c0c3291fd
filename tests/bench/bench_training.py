"""Training throughput (env steps/s, updates included) vs gymnasium's plain env.step loop.

Both run in the same process on the same env: the reference is
``gymnasium.make(env).step(constant action)`` for ``--ref-steps`` steps; the
trainer runs flat mode with an mlp controller on the batched rig. Target:
ratio >= 0.5. Prints a markdown table row.

    python tests/bench/bench_training.py [--env Hopper-v5] [--budget 32768] [--workers 1] [--blas-matvec]

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


def train_loop(env_id: str, budget: int, workers: int, parallel_envs: int, segment_steps: int, update_passes: int, minibatch_size: int) -> tuple[float, float]:
    from kinetome.envs import make_rig
    from kinetome.library.controllers import build_controller, context_from_rig
    from kinetome.trainers import OptionCriticTrainer, TrainConfig, flat_skill

    rig = make_rig(env_id)
    ctrl = build_controller("mlp", context_from_rig(rig), settings={"inputs": ["qpos", "qvel"], "hidden": [64, 64]})
    cfg = TrainConfig(env_step_budget=budget, parallel_envs=parallel_envs, segment_steps=segment_steps, update_passes=update_passes, minibatch_size=minibatch_size,
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
    ap.add_argument("--budget", type=int, default=32768)
    ap.add_argument("--ref-steps", type=int, default=20000)
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--parallel-envs", type=int, default=64)
    ap.add_argument("--segment-steps", type=int, default=64)
    ap.add_argument("--update-passes", type=int, default=4)
    ap.add_argument("--minibatch-size", type=int, default=1024)
    ap.add_argument("--blas-matvec", action="store_true")
    a = ap.parse_args()
    if a.blas_matvec:
        import torch.nn.functional as F

        import kinetome.library.controllers.mlp as mlp

        mlp.matvec = lambda x, w: F.linear(x, w)
    ref = gym_loop(a.env, a.ref_steps)
    rate, wall = train_loop(a.env, a.budget, a.workers, a.parallel_envs, a.segment_steps, a.update_passes, a.minibatch_size)
    ref_after = gym_loop(a.env, a.ref_steps)  # measured again: the machine is shared
    ref_mean = 0.5 * (ref + ref_after)
    print("| env | trainer steps/s (updates incl.) | gymnasium env.step steps/s | ratio | config |")
    print("| --- | --- | --- | --- | --- |")
    print(f"| {a.env} | {rate:,.0f} | {ref_mean:,.0f} | {rate / ref_mean:.2f} | "
          f"{a.parallel_envs} envs x {a.segment_steps} steps, {a.update_passes} update passes, minibatch {a.minibatch_size}, workers {a.workers}, budget {a.budget} env steps"
          f"{', BLAS matvec (what-if)' if a.blas_matvec else ''} |")


if __name__ == "__main__":
    main()

"""Benchmark: env.step rate of kinetome's own envs against a raw mujoco.mj_step loop, same model, same run.

Run by hand: ``python tests/bench/bench_envs.py [--rounds 20] [--steps 500]``.

Both loops do the same physics: each round starts every loop from the same
start state (``env.reset(seed=round)``) and applies the same constant action
for the same number of steps, so the simulated trajectories, and with them
the constraint-solver work, are identical. Rounds interleave the loops, so
load on the shared machine drifts through all of them alike. The ratio is
env steps/s over raw steps/s (target >= 0.7): what the wrapper costs on top
of MuJoCo.
"""

from __future__ import annotations

import argparse
import time

import gymnasium as gym
import mujoco
import numpy as np

import kinetome.envs  # noqa: F401

ENVS = ("kinetome/BenchArm-v0", "kinetome/TestWalker-v0", "kinetome/TestWalkerStand-v0")


def _timed(loop, steps: int) -> float:
    start = time.perf_counter()
    loop(steps)
    return time.perf_counter() - start


def bench(env_id: str, rounds: int, steps: int) -> dict[str, float]:
    wrapped = gym.make(env_id, max_episode_steps=10**9)  # no truncation inside a round
    env = wrapped.unwrapped
    rig = env.rig
    action = ((rig.action_low + rig.action_high) / 2 + 0.1 * rig.action_high).astype(np.float32)
    model, data = rig.model, mujoco.MjData(rig.model)
    totals = {"gym": 0.0, "rig_env": 0.0, "raw": 0.0, "raw_forward": 0.0}

    def start_raw(seed: int) -> None:
        env.reset(seed=seed)  # the same start state the env loops use
        mujoco.mj_resetData(model, data)
        data.qpos[:] = env.data.qpos
        data.qvel[:] = env.data.qvel
        data.ctrl[:] = action
        mujoco.mj_forward(model, data)

    def gym_loop(n: int) -> None:
        for _ in range(n):
            wrapped.step(action)

    def env_loop(n: int) -> None:
        for _ in range(n):
            env.step(action)

    def raw_loop(n: int) -> None:
        for _ in range(n):
            mujoco.mj_step(model, data, nstep=rig.frame_skip)

    def raw_forward_loop(n: int) -> None:
        for _ in range(n):
            mujoco.mj_step(model, data, nstep=rig.frame_skip)
            mujoco.mj_forward(model, data)

    for r in range(rounds + 1):  # round 0 warms up and is not counted
        wrapped.reset(seed=r)
        t_gym = _timed(gym_loop, steps)
        env.reset(seed=r)
        t_env = _timed(env_loop, steps)
        start_raw(r)
        t_raw = _timed(raw_loop, steps)
        start_raw(r)
        t_fwd = _timed(raw_forward_loop, steps)
        if r:
            totals["gym"] += t_gym
            totals["rig_env"] += t_env
            totals["raw"] += t_raw
            totals["raw_forward"] += t_fwd
    wrapped.close()
    n = rounds * steps
    return {k: n / v for k, v in totals.items()}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--rounds", type=int, default=20, help="interleaved rounds (default 20)")
    parser.add_argument("--steps", type=int, default=500, help="env steps per loop per round (default 500)")
    args = parser.parse_args()
    print("| env | gym.make step/s | RigEnv step/s | raw mj_step(frame_skip) /s | raw + mj_forward /s "
          "| ratio gym/raw | ratio RigEnv/raw |")
    print("| --- | ---: | ---: | ---: | ---: | ---: | ---: |")
    for env_id in ENVS:
        r = bench(env_id, args.rounds, args.steps)
        print(f"| {env_id} | {r['gym']:,.0f} | {r['rig_env']:,.0f} | {r['raw']:,.0f} | {r['raw_forward']:,.0f} "
              f"| {r['gym'] / r['raw']:.2f} | {r['rig_env'] / r['raw']:.2f} |")


if __name__ == "__main__":
    main()

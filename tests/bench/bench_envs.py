"""Benchmark: env.step rate of kinetome's own envs against a raw mujoco.mj_step loop, same model, same run.

Run by hand: ``python tests/bench/bench_envs.py [--seconds 2]``. Prints a
markdown table; the ratio column is env steps/s over raw steps/s (target >= 0.7).
"""

from __future__ import annotations

import argparse
import os
import time

os.environ.setdefault("MUJOCO_GL", "osmesa")

import gymnasium as gym  # noqa: E402
import mujoco  # noqa: E402
import numpy as np  # noqa: E402

import kinetome.envs  # noqa: E402,F401
from kinetome.envs.rig import read_state  # noqa: E402

ENVS = ("kinetome/BenchArm-v0", "kinetome/TestWalker-v0", "kinetome/TestWalkerStand-v0")


def _rate(step, seconds: float) -> float:
    """Calls of ``step`` per second over about ``seconds`` (after a short warm-up)."""
    for _ in range(200):
        step()
    n, start = 0, time.perf_counter()
    while True:
        for _ in range(500):
            step()
        n += 500
        elapsed = time.perf_counter() - start
        if elapsed >= seconds:
            return n / elapsed


def bench(env_id: str, seconds: float) -> dict[str, float]:
    wrapped = gym.make(env_id)
    env = wrapped.unwrapped
    rig = env.rig
    action = ((rig.action_low + rig.action_high) / 2 + 0.1 * rig.action_high).astype(np.float32)

    def reset_if_needed(result):
        if result[2] or result[3]:
            wrapped.reset()

    wrapped.reset(seed=0)
    gym_rate = _rate(lambda: reset_if_needed(wrapped.step(action)), seconds)
    env.reset(seed=0)
    rig_env_rate = _rate(lambda: reset_if_needed(env.step(action)), seconds)

    model, data = rig.model, mujoco.MjData(rig.model)
    data.qpos[:] = env.data.qpos
    data.ctrl[:] = action

    def raw():
        mujoco.mj_step(model, data, nstep=rig.frame_skip)

    raw_rate = _rate(raw, seconds)

    def raw_forward():
        mujoco.mj_step(model, data, nstep=rig.frame_skip)
        mujoco.mj_forward(model, data)

    forward_rate = _rate(raw_forward, seconds)

    def read_only():
        read_state(rig, qpos=data.qpos[None].copy(), qvel=data.qvel[None].copy(),
                   sensordata=data.sensordata[None].copy(), ctrl=data.ctrl[None].copy())

    read_rate = _rate(read_only, seconds)
    wrapped.close()
    return {"gym": gym_rate, "rig_env": rig_env_rate, "raw": raw_rate, "raw_forward": forward_rate, "read": read_rate}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--seconds", type=float, default=2.0, help="time per measurement (default 2)")
    args = parser.parse_args()
    print("| env | gym.make step/s | RigEnv step/s | raw mj_step(frame_skip) /s | raw + mj_forward /s "
          "| read_state /s | ratio gym/raw | ratio RigEnv/raw |")
    print("| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |")
    for env_id in ENVS:
        r = bench(env_id, args.seconds)
        print(f"| {env_id} | {r['gym']:,.0f} | {r['rig_env']:,.0f} | {r['raw']:,.0f} | {r['raw_forward']:,.0f} "
              f"| {r['read']:,.0f} | {r['gym'] / r['raw']:.2f} | {r['rig_env'] / r['raw']:.2f} |")


if __name__ == "__main__":
    main()

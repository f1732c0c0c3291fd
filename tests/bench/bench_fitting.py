"""Benchmark: option-model fitting time per 1,000 episodes against raw MuJoCo stepping of the same episodes.

Run by hand: ``python tests/bench/bench_fitting.py [--episodes 1000] [--repeat 3]``.
For a joint-PD reach on the bench arm it records 1,000 episodes with the
runtime, then times (a) ``fit_option_models`` on them, (b) a raw
``mujoco.mj_step`` loop over the same number of env steps on one MjData, and
(c) a synthetic rollout with 14 start inputs (random Fourier features) and a
21-component end state. Prints a markdown table; "fit / raw sim" is fitting
time over the time the raw simulator needs for the episodes' steps.

On a shared machine run with ``OPENBLAS_NUM_THREADS=1``: threaded BLAS on these
small matrices (a few thousand rows, tens to hundreds of columns) was measured
5-30x slower when other processes hold the cores.
"""

from __future__ import annotations

import argparse
import os
import time

import mujoco
import numpy as np

from kinetome.envs import make_rig
from kinetome.library.runtime.execute import run_skill
from kinetome.library.runtime.records import ChainRollout, SegmentRecord
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.runtime.starts import sample_starts
from kinetome.library.spec_load import parse_spec_text
from kinetome.trainers.fitting import fit_option_models

REACH = """
name: bench-reach
description: joint-PD reach from the home pose to the tray
env: kinetome/BenchArm-v0
controller:
  kind: joint_pd
  parameters:
    setpoint: [1.4436, -1.5135, -1.3895]
    kp: [30.0, 20.0, 6.0]
    kd: [3.0, 2.0, 0.3]
starts_when: norm(qvel) < 0.5
stops_when: norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05
max_steps: 150
"""


def _best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def _raw_sim_seconds(rig, env_steps: int, repeat: int) -> float:
    model, data = rig.model, mujoco.MjData(rig.model)
    mujoco.mj_resetData(model, data)

    def loop():
        for _ in range(env_steps):
            mujoco.mj_step(model, data, nstep=rig.frame_skip)

    return _best(loop, repeat)


def _synthetic(n: int, seed: int) -> ChainRollout:
    rng = np.random.default_rng(seed)
    s = rng.normal(size=(n, 14))
    steps = rng.integers(10, 80, size=n)
    reason = np.where(rng.random(n) < 0.2, 1, 0).astype(np.int8)
    end = {"a": s[:, :7] + 0.1 * rng.normal(size=(n, 7)), "b": rng.normal(size=(n, 14))}
    gamma = 0.99
    seg = SegmentRecord("syn@1", {"s": s}, end, reason, steps, steps * 1.0, (1 - gamma**steps) / (1 - gamma), gamma**steps.astype(float))
    return ChainRollout("kinetome/Synthetic-v0", seed, gamma, (seg,))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--episodes", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    n = args.episodes

    rig = make_rig("kinetome/BenchArm-v0")
    skill = skill_from_spec(parse_spec_text(REACH), rig=rig)
    qpos, qvel = sample_starts(rig, None, n, seed=0)
    t = time.perf_counter()
    rollout = run_skill(skill, rig, starts=(qpos, qvel), seed=0, gamma=0.99)
    collect = time.perf_counter() - t
    env_steps = int(rollout.segments[0].steps.sum())
    raw = _raw_sim_seconds(rig, env_steps, args.repeat)
    fit_arm = _best(lambda: fit_option_models(rollout, envelope=rig.layout, fitted_at="bench"), args.repeat)
    syn = _synthetic(n, 1)
    fit_syn = _best(lambda: fit_option_models(syn, fitted_at="bench"), args.repeat)
    per_k = 1000.0 / n
    print(f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS', 'unset')}\n")

    print("| case | episodes | env steps | fit s / 1k episodes | raw mj_step s (same steps) | fit / raw sim | runtime collect / raw sim |")
    print("| --- | ---: | ---: | ---: | ---: | ---: | ---: |")
    print(f"| BenchArm reach, features qpos+qvel (poly2, 6 inputs), 21-d end state | {n} | {env_steps} | {fit_arm * per_k:.3f} | {raw:.3f} | {fit_arm / raw:.2f} | {collect / raw:.2f} |")
    print(f"| synthetic, 14 inputs (rff 256), 21-d end state, 20% timeouts | {n} | {env_steps} (arm's) | {fit_syn * per_k:.3f} | {raw:.3f} | {fit_syn / raw:.2f} | - |")


if __name__ == "__main__":
    main()

"""Benchmark: episodes/s of a 1,000-episode simulation check in one process and on Ray workers.

Run by hand (not collected by pytest):

    python tests/bench/bench_scaleout.py [--episodes 1000] [--repeat 2] [--block-size 256]

The check is the bench arm's lift -> reach -> place chain (spec files, no store),
``--method sim``, fixed plan, blocks of ``--block-size`` episodes. Rows:

- one process, 1 MuJoCo thread (the reference, measured before and after the others);
- one process, 2 MuJoCo threads (``--threads 2``);
- 1 and 2 Ray workers, one thread each, warm (Ray started and every worker's skills built
  before the clock starts; Ray's start-up is timed separately).

The raw simulator (``mujoco.rollout``, 1 thread, the same model and physics steps per
env step) is measured in the same run. Results are identical in every row (checked).
Target: 2 Ray workers >= 1.8x one process on one thread. Also prints the per-block cost
and the bytes sent and returned per block, for the scale-out note in README.
"""

from __future__ import annotations

import argparse
import os
import pickle
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
SKILLS = ("arm-lift", "arm-reach-tray", "arm-place")


def write_chain(folder: Path, episodes: int) -> Path:
    import yaml

    data = {
        "name": "bench-scaleout",
        "task": {"env": "kinetome/BenchArm-v0", "initial_states": str(ROOT / "configs" / "initial_states" / "arm_home.yaml")},
        "skills": [str(ROOT / "configs" / "skills" / f"{s}.yaml") for s in SKILLS],
        "episodes": episodes,
        "seed": 0,
    }
    path = folder / "bench-scaleout.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def timed_check(path: Path, block_size: int, **where) -> tuple[float, dict]:
    from kinetome.library.checker import check_chain

    t = time.perf_counter()
    result = check_chain(path, method="sim", block_size=block_size, **where)
    wall = time.perf_counter() - t
    d = result.to_dict()
    d.pop("timings_s", None)
    return wall, d


def raw_simulator(physics_steps: int) -> float:
    """mujoco.rollout physics steps/s on the bench arm model, 1 thread, zero controls (16 states at once)."""
    import mujoco
    from mujoco import rollout

    from kinetome.envs import make_rig

    model = make_rig("kinetome/BenchArm-v0").model
    data = mujoco.MjData(model)
    batch, nstep = 16, max(1, physics_steps // 16)
    state = np.zeros((batch, mujoco.mj_stateSize(model, mujoco.mjtState.mjSTATE_FULLPHYSICS)))
    for i in range(batch):
        mujoco.mj_getState(model, data, state[i], mujoco.mjtState.mjSTATE_FULLPHYSICS)
    control = np.zeros((batch, nstep, model.nu))
    with rollout.Rollout(nthread=0) as r:
        r.rollout(model, data, state[:, :], control[:, :10])  # warm-up
        t = time.perf_counter()
        r.rollout(model, data, state, control)
        return batch * nstep / (time.perf_counter() - t)


def block_traffic(path: Path, block_size: int) -> dict[str, float]:
    """Bytes of one block's work item and of its result, and its compute time in this process (1 thread)."""
    from kinetome.library.checker.chain import load_chain
    from kinetome.library.checker.context import CheckOptions, prepare_context
    from kinetome.library.execution import Block
    from kinetome.library.execution.chain_blocks import chain_job, run_chain_block

    ctx = prepare_context(load_chain(path, store=None), store=None, options=CheckOptions(method="sim"))
    job = chain_job(list(ctx.skills), ctx.rig, seed=ctx.seed, disturbances=ctx.chain.disturbances, may_time_out=ctx.chain.may_time_out)
    qpos, qvel = ctx.block_starts(0, block_size)
    item = {"job": job, "block": Block(0, 0, block_size).to_dict(), "qpos": qpos, "qvel": qvel}
    run_chain_block(item)  # builds the job once, as a warm worker has
    t = time.perf_counter()
    result = run_chain_block(item)
    compute = time.perf_counter() - t
    return {"item_bytes": len(pickle.dumps(item)), "result_bytes": len(pickle.dumps(result)), "block_s": compute,
            "steps": int(sum(s.steps.sum() for s in result.segments))}


def blocks_only(path: Path, block_size: int, repeat: int) -> tuple[float, float]:
    """Wall time of the check's blocks alone (no check around them): in this process (1 thread), and on
    one warm Ray worker (Ray running). The difference per block is Ray's cost per block."""
    from kinetome.library.checker.chain import load_chain
    from kinetome.library.checker.context import CheckOptions, prepare_context
    from kinetome.library.execution import InProcessExecutor, plan_blocks
    from kinetome.library.execution.chain_blocks import chain_job, run_chain_blocks
    from kinetome.library.execution.ray_executor import RayExecutor

    ctx = prepare_context(load_chain(path, store=None), store=None, options=CheckOptions(method="sim"))
    job = chain_job(list(ctx.skills), ctx.rig, seed=ctx.seed, disturbances=ctx.chain.disturbances, may_time_out=ctx.chain.may_time_out)
    blocks = plan_blocks(ctx.episodes, block_size)
    starts = lambda b: ctx.block_starts(b.first, b.stop)  # noqa: E731
    out = []
    for executor in (InProcessExecutor(), RayExecutor(workers=1, address=None)):
        list(run_chain_blocks(executor, job, blocks[:1], starts))  # warm
        walls = []
        for _ in range(repeat):
            t = time.perf_counter()
            list(run_chain_blocks(executor, job, blocks, starts))
            walls.append(time.perf_counter() - t)
        out.append(min(walls))
    return out[0], out[1]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--episodes", type=int, default=1000)
    ap.add_argument("--block-size", type=int, default=256)
    ap.add_argument("--repeat", type=int, default=2, help="runs per row; the best is reported")
    a = ap.parse_args()
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    load_before = os.getloadavg()[0]
    folder = Path(tempfile.mkdtemp(prefix="kinetome-bench-scaleout-"))
    path = write_chain(folder, a.episodes)
    n_blocks = -(-a.episodes // a.block_size)

    def best(**where) -> tuple[float, dict]:
        runs = [timed_check(path, a.block_size, **where) for _ in range(a.repeat)]
        return min(w for w, _ in runs), runs[0][1]

    timed_check(path, a.block_size)  # warm-up: imports, model compile
    one_before, reference = best(threads=1)
    two_threads, d2 = best(threads=2)

    from kinetome.library.execution import executor_for

    t = time.perf_counter()
    owner = executor_for(2)  # a local Ray with 2 CPUs; check() reuses it
    ray_start = time.perf_counter() - t
    timed_check(path, a.block_size, workers=2)  # warm: both workers import and build the chain's skills
    ray_two, dr2 = best(workers=2)
    here_blocks, ray_blocks = blocks_only(path, a.block_size, a.repeat)
    owner.close()
    one_after, d1b = best(threads=1)
    assert reference == d2 == dr2 == d1b, "results differ between rows"
    traffic = block_traffic(path, a.block_size)
    one = 0.5 * (one_before + one_after)
    env_steps = traffic["steps"] * a.episodes / a.block_size
    from kinetome.envs import make_rig

    frame_skip = make_rig("kinetome/BenchArm-v0").frame_skip
    raw = raw_simulator(int(env_steps * frame_skip) // 4) / frame_skip  # env steps/s
    rows = [
        ("one process, 1 thread", one, f"before {a.episodes / one_before:,.0f}, after {a.episodes / one_after:,.0f}"),
        ("one process, 2 threads (--threads 2)", two_threads, ""),
        ("blocks only, this process, 1 thread (no check around them)", here_blocks, ""),
        ("blocks only, 1 Ray worker (warm)", ray_blocks, ""),
        ("2 Ray workers, 1 thread each (warm)", ray_two, ""),
    ]
    print(f"1-min load average {load_before:.1f} before, {os.getloadavg()[0]:.1f} after, on {os.cpu_count()} CPUs; "
          f"{a.episodes} episodes in {n_blocks} blocks of {a.block_size}; results identical in every row")
    print(f"raw simulator (mujoco.rollout, 1 thread): {raw:,.0f} env steps/s; one process 1 thread simulates "
          f"{env_steps / one:,.0f} env steps/s ({env_steps / one / raw:.2f}x raw)")
    print(f"Ray start-up (local, 2 CPUs, first version check): {ray_start:.1f} s (not in the rows)")
    print()
    print("| how | wall s | episodes/s | vs one process 1 thread | note |")
    print("| --- | ---: | ---: | ---: | --- |")
    for label, wall, note in rows:
        print(f"| {label} | {wall:.2f} | {a.episodes / wall:,.0f} | {one / wall:.2f}x | {note} |")
    overhead = (ray_blocks - here_blocks) / n_blocks
    print()
    print(f"per block of {a.block_size} episodes: compute {traffic['block_s']:.3f} s (1 thread, {traffic['steps']:,} env steps), "
          f"work item {traffic['item_bytes'] / 1024:.1f} KiB, result {traffic['result_bytes'] / 1024:.1f} KiB, "
          f"Ray's cost about {overhead:+.3f} s per block (1 Ray worker minus this process, blocks only)")


if __name__ == "__main__":
    main()

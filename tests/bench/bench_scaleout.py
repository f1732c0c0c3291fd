"""Benchmark: episodes/s of a 1,000-episode simulation check in one process and on Ray workers, in interleaved rounds.

Run by hand (not collected by pytest):

    python tests/bench/bench_scaleout.py [--episodes 1000] [--rounds 7] [--block-size 256]

The check is the bench arm's lift -> reach -> place chain (spec files, no store),
``--method sim``, fixed plan, blocks of ``--block-size`` episodes. Configurations:

- one process, 1 MuJoCo thread (the reference);
- one process, 2 MuJoCo threads (``--threads 2``);
- 2 Ray workers, one thread each, warm (Ray started and both workers' skills built before
  the clock starts; Ray's start-up is timed separately);
- the same check on 2 plain OS processes (multiprocessing, spawned and warm; no Ray): what
  the check's blocks give on two workers without Ray's machinery;
- the raw simulator (``mujoco.rollout``, one thread, the same model) in one OS process and in
  two at once: the machine's own parallel ceiling in that round (tests/bench/rounds.py);
- the check's blocks alone (no check around them) in this process and on one warm Ray worker:
  the difference per block is Ray's cost per block.

Every configuration runs once per round, the order rotated each round, so the ratios of a
round compare runs made under the same conditions; the report gives the median of the
per-round ratios and their min-max. Results are identical in every check (checked each
round). Target: 2 Ray workers >= 1.8x one process on one thread (median of rounds).
Also prints the per-block cost and the bytes sent and returned per block, for the
scale-out note in README, and the load average before, after and per round.
"""

from __future__ import annotations

import argparse
import contextlib
import multiprocessing
import os
import pickle
import sys
import tempfile
import time
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(Path(__file__).resolve().parent))
from rounds import RawSimulator, column, load, load_line, median, ratios, run_rounds, summary  # noqa: E402

SKILLS = ("arm-lift", "arm-reach-tray", "arm-place")
ENV = "kinetome/BenchArm-v0"


def write_chain(folder: Path, episodes: int) -> Path:
    import yaml

    data = {
        "name": "bench-scaleout",
        "task": {"env": ENV, "initial_states": str(ROOT / "configs" / "initial_states" / "arm_home.yaml")},
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


class PlainProcesses:
    """The executor interface on a multiprocessing pool (spawned, one thread per library): no Ray involved."""

    def __init__(self, workers: int):
        from kinetome.library.execution.worker import prepare_worker

        self.workers = workers
        self.where = f"{workers} plain processes"
        self._pool = multiprocessing.get_context("spawn").Pool(workers, initializer=prepare_worker)

    def map(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> list[Any]:
        return list(self.imap(fn, items))

    def imap(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        return self._pool.imap(fn, items, chunksize=1)

    def close(self) -> None:
        """Kept warm between checks; ``shutdown`` ends it."""

    def shutdown(self) -> None:
        self._pool.terminate()
        self._pool.join()


@contextlib.contextmanager
def checks_on(executor: Any) -> Iterator[None]:
    """Checks run meanwhile send their blocks to ``executor`` (a what-if for this benchmark only)."""
    import kinetome.library.execution as execution

    saved = execution.executor_for
    execution.executor_for = lambda *a, **k: executor
    try:
        yield
    finally:
        execution.executor_for = saved


def check_blocks(path: Path, block_size: int):
    """(job, blocks, starts) of the check's simulation, as the checker builds them."""
    from kinetome.library.checker.chain import load_chain
    from kinetome.library.checker.context import CheckOptions, prepare_context
    from kinetome.library.execution import plan_blocks
    from kinetome.library.execution.chain_blocks import chain_job

    ctx = prepare_context(load_chain(path, store=None), store=None, options=CheckOptions(method="sim"))
    job = chain_job(list(ctx.skills), ctx.rig, seed=ctx.seed, disturbances=ctx.chain.disturbances, may_time_out=ctx.chain.may_time_out)
    return job, plan_blocks(ctx.episodes, block_size), lambda b: ctx.block_starts(b.first, b.stop)


def block_traffic(job: dict, blocks: list, starts: Callable) -> dict[str, float]:
    """Bytes of one block's work item and of its result, and its compute time in this process (1 thread)."""
    from kinetome.library.execution.chain_blocks import run_chain_block

    qpos, qvel = starts(blocks[0])
    item = {"job": job, "block": blocks[0].to_dict(), "qpos": qpos, "qvel": qvel}
    run_chain_block(item)  # builds the job once, as a warm worker has
    t = time.perf_counter()
    result = run_chain_block(item)
    compute = time.perf_counter() - t
    return {"item_bytes": len(pickle.dumps(item)), "result_bytes": len(pickle.dumps(result)), "block_s": compute,
            "steps": int(sum(s.steps.sum() for s in result.segments))}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--episodes", type=int, default=1000)
    ap.add_argument("--block-size", type=int, default=256)
    ap.add_argument("--rounds", type=int, default=7, help="interleaved rounds (>= 5 advised); medians of per-round ratios")
    a = ap.parse_args()
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    load_before = load()
    folder = Path(tempfile.mkdtemp(prefix="kinetome-bench-scaleout-"))
    path = write_chain(folder, a.episodes)

    from kinetome.library.execution import InProcessExecutor, executor_for
    from kinetome.library.execution.chain_blocks import run_chain_blocks
    from kinetome.library.execution.ray_executor import RayExecutor

    _, reference = timed_check(path, a.block_size)  # warm-up: imports, model compile
    t = time.perf_counter()
    owner = executor_for(2)  # a local Ray with 2 CPUs; check() reuses it
    ray_start = time.perf_counter() - t
    timed_check(path, a.block_size, workers=2)  # warm: both workers import and build the chain's skills
    ray_one = RayExecutor(workers=1, address=None)
    plain = PlainProcesses(2)
    with checks_on(plain):
        timed_check(path, a.block_size)  # warm: both processes import and build the skills
    raw = RawSimulator(ENV, seconds=1.0)
    job, blocks, starts = check_blocks(path, a.block_size)
    traffic = block_traffic(job, blocks, starts)
    list(run_chain_blocks(ray_one, job, blocks[:1], starts))

    def check(**where) -> Callable[[], float]:
        def run() -> float:
            wall, d = timed_check(path, a.block_size, **where)
            assert d == reference, f"results differ from one process, 1 thread ({where})"
            return wall
        return run

    def on_plain() -> float:
        with checks_on(plain):
            return check()()

    def blocks_on(executor: Any) -> Callable[[], float]:
        def run() -> float:
            t = time.perf_counter()
            list(run_chain_blocks(executor, job, blocks, starts))
            return time.perf_counter() - t
        return run

    configs = {
        "one": check(threads=1), "threads2": check(threads=2), "ray2": check(workers=2), "plain2": on_plain,
        "raw1": raw.one, "raw2": raw.two, "blocks_here": blocks_on(InProcessExecutor()), "blocks_ray1": blocks_on(ray_one),
    }
    loads: list[float] = []

    def progress(r: int, m: dict) -> None:
        loads.append(os.getloadavg()[0])
        print(f"round {r + 1}: 2 Ray workers {m['one'] / m['ray2']:.2f}x, 2 plain processes {m['one'] / m['plain2']:.2f}x, "
              f"2 threads {m['one'] / m['threads2']:.2f}x, raw simulator 2 processes {m['raw2'] / m['raw1']:.2f}x; "
              f"load {loads[-1]:.2f}", file=sys.stderr, flush=True)

    runs = run_rounds(configs, a.rounds, on_round=progress)
    raw.close()
    plain.shutdown()
    owner.close()
    report(a, runs, traffic, ray_start, load_before, loads, [b.count for b in blocks])


def report(a: Any, runs: list[dict], traffic: dict, ray_start: float, load_before: str, loads: list[float], counts: list[int]) -> None:
    from kinetome.envs import make_rig

    frame_skip = make_rig(ENV).frame_skip
    env_steps = traffic["steps"] * a.episodes / counts[0]
    n_blocks = len(counts)
    col = lambda k: column(runs, k)  # noqa: E731
    ratio = lambda num, den: ratios(runs, num, den)  # noqa: E731
    ceiling = ratio("raw2", "raw1")
    ray_vs_one = ratio("one", "ray2")
    print(load_line(load_before, loads))
    print(f"{a.episodes} episodes in {n_blocks} blocks of at most {a.block_size} ({'/'.join(map(str, counts))}); {a.rounds} rounds, order rotated each round; "
          f"results identical in every check of every round")
    print(f"Ray start-up (local, 2 CPUs, first version check): {ray_start:.1f} s (not in the rows)")
    print(f"one process 1 thread simulates {summary([env_steps / w for w in col('one')], '{:,.0f}')} env steps/s = "
          f"{summary([env_steps / m['one'] / (m['raw1'] / frame_skip) for m in runs])}x the raw simulator in the same round")
    print()
    print("| how | wall s, median [min-max] | episodes/s (median) | vs one process 1 thread, median of per-round ratios [min-max] |")
    print("| --- | ---: | ---: | ---: |")
    for key, label in (("one", "one process, 1 thread"), ("threads2", "one process, 2 threads (--threads 2)"),
                       ("ray2", "2 Ray workers, 1 thread each (warm)"), ("plain2", "2 plain processes (multiprocessing, no Ray; what-if)")):
        print(f"| {label} | {summary(col(key))} | {a.episodes / median(col(key)):,.0f} | {summary(ratio('one', key))}x |")
    print(f"| ceiling: raw simulator, 2 OS processes vs 1 (same rounds) | - | - | {summary(ceiling)}x |")
    print()
    print(f"2 Ray workers vs one process 1 thread: {summary(ray_vs_one)}x (target >= 1.8x: "
          f"{'met' if median(ray_vs_one) >= 1.8 else 'missed'}); as a share of the same round's ceiling "
          f"{summary([r / c for r, c in zip(ray_vs_one, ceiling)])}; vs 2 plain processes {summary(ratio('plain2', 'ray2'))}x")
    overhead = [(m["blocks_ray1"] - m["blocks_here"]) / n_blocks for m in runs]
    print(f"per block of {counts[0]} episodes: compute {traffic['block_s']:.3f} s (1 thread, {traffic['steps']:,} env steps; "
          f"blocks only in this process {summary(col('blocks_here'))} s for all {n_blocks}), "
          f"work item {traffic['item_bytes'] / 1024:.1f} KiB, result {traffic['result_bytes'] / 1024:.1f} KiB, "
          f"Ray's cost {summary(overhead, '{:+.3f}')} s per block (1 warm Ray worker minus this process, blocks only)")


if __name__ == "__main__":
    main()

"""Sweep benchmark: a 5 x 5 sweep (payload mass x motor gain) of the bench arm's reach skill, 200 episodes
per cell, on 1 and 2 local Ray workers in the same run, against gymnasium's plain env.step loop.

Prints a Markdown row per worker count: wall time, env steps/s, the ratio to gymnasium's loop measured
in this run, and the speed-up of 2 workers over 1; checks that both runs gave identical cells.

    python tests/bench/bench_sweep.py [--episodes 200] [--workers 1 2]

With a Ray cluster already running on this machine (`ray start`), set RAY_ADDRESS=local so the
workers run on a private local Ray.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(Path(__file__).resolve().parent))

PAYLOADS = "0.2,0.4,0.6,0.8,1.0"
GAINS = "0.6,0.7,0.8,0.9,1.0"


def _gym_steps_per_second(seconds: float) -> float:
    from bench_checker import _gym_steps_per_second as rate

    return rate(seconds)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--episodes", type=int, default=200, help="episodes per cell (default 200)")
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2], help="worker counts to time (default 1 2)")
    args = parser.parse_args(argv)

    from kinetome.library import api

    rows, cells = [], []
    with tempfile.TemporaryDirectory() as tmp:
        store = api.open_store(Path(tmp) / "store")
        api.register(REPO / "configs" / "skills" / "arm-reach-tray.yaml", store=store)
        for workers in args.workers:
            t0 = time.perf_counter()
            result = api.sweep("arm-reach-tray", store=store, axes=[f"payload_mass={PAYLOADS}", f"actuator_gain={GAINS}"],
                               episodes=args.episodes, require=0.9, reuse=False, workers=workers,
                               initial_states=REPO / "configs" / "initial_states" / "arm_clearance.yaml")
            seconds = time.perf_counter() - t0  # Ray start-up included for workers > 1
            steps = sum(c["env_steps"] for c in result["cells"])
            rows.append((workers, seconds, steps))
            cells.append([(c["successes"], c["episodes"]) for c in result["cells"]])
    gym_rate = _gym_steps_per_second(5.0)
    load = os.getloadavg()[0]
    identical = all(c == cells[0] for c in cells)
    print(f"{len(cells[0])} cells x {args.episodes} episodes; identical cells at every worker count: {identical}; "
          f"load average {load:.1f} on {os.cpu_count()} cores", file=sys.stderr)
    print("| workers | wall time | env steps/s | vs gymnasium env.step | speed-up over 1 worker |")
    print("| --- | --- | --- | --- | --- |")
    base = rows[0][1]
    for workers, seconds, steps in rows:
        rate = steps / seconds
        print(f"| {workers} | {seconds:.1f} s | {rate:,.0f} | {rate / gym_rate:.2f}x (gymnasium {gym_rate:,.0f}) | {base / seconds:.2f}x |")
    return 0 if identical else 1


if __name__ == "__main__":
    raise SystemExit(main())

"""Benchmark the chain checker on the bench arm (run by hand: python tests/bench/bench_checker.py).

1. A 20-handoff chain (to the tray and back to the clearance pose, 21 distinct skills, so no
   handoff repeats a solver question): ``--method auto`` against a 1,000-episode ``--method sim``
   check of the same chain, in the same run. auto proves containment with z3 and sizes its
   liveness evidence by the exact one-sided zero-failure bound (59 clean episodes for 0.95 at 95%
   confidence); the episodes it actually ran are printed. Target: auto < 15% of sim's time.
2. The simulation check's throughput (env steps / s over every skill of every episode, one
   thread) against gymnasium's plain ``env.step`` loop on the same robot (constant action).
   Target: >= 1.0x.
Prints markdown table rows.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

REPO = Path(__file__).resolve().parents[2]
SKILLS = REPO / "configs" / "skills"


_CONTROLLER = {
    # joint PD gains of the demo arm skills; setpoints: the tray pose and the clearance pose over the pick site
    "tray": "setpoint: [1.4436, -1.5135, -1.3895]",
    "clear": "setpoint: [0.6193, -1.2482, -0.8487]",
}


def _spec(folder: Path, i: int) -> Path:
    """Step i: to the tray (even) or back to the clearance pose (odd); thresholds differ per step,
    so no two handoffs ask the solver the same question."""
    kind = "tray" if i % 2 == 0 else "clear"
    if kind == "tray":
        starts = f"norm(qvel) < {0.5 + 0.01 * i:.3f}"
        stops = f"norm(fingertip - target) < {0.02 + 0.0005 * i:.4f} and norm(fingertip_vel) < 0.05"
    else:
        starts = f"norm(qvel) < {0.6 + 0.01 * i:.3f}"
        stops = f"norm(fingertip - [0.435, 0.0, 0.273]) < {0.03 + 0.0005 * i:.4f} and all(abs(qvel) <= 0.2)"
    text = (
        f"name: bench-step-{i}\nenv: kinetome/BenchArm-v0\ncontroller:\n  kind: joint_pd\n  parameters:\n"
        f"    {_CONTROLLER[kind]}\n    kp: [30.0, 20.0, 6.0]\n    kd: [3.0, 2.0, 0.3]\n"
        f"starts_when: '{starts}'\nstops_when: '{stops}'\nmax_steps: 150\n"
        "limits: {joint_speed: 10.0, end_effector_speed: 2.0, torque: 8.0}\n"
    )
    path = folder / f"bench-step-{i}.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _chain_file(folder: Path, handoffs: int, episodes: int) -> Path:
    skills = [str(_spec(folder, i)) for i in range(handoffs + 1)]
    text = (
        "name: bench-twenty\ntask:\n  env: kinetome/BenchArm-v0\n"
        f"  initial_states: {REPO / 'configs' / 'initial_states' / 'arm_home.yaml'}\n"
        f"skills: [{', '.join(skills)}]\nrequire: {{handoff: 0.95, chain: 0.95}}\nconfidence: 0.95\nepisodes: {episodes}\n"
    )
    path = folder / "bench-twenty.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def _gym_steps_per_second(seconds: float) -> float:
    import gymnasium as gym
    import numpy as np

    import kinetome.envs  # noqa: F401  (registers the envs)

    env = gym.make("kinetome/BenchArm-v0")
    env.reset(seed=0)
    action = np.zeros(env.action_space.shape, dtype=np.float32)
    steps = 0
    t0 = time.perf_counter()
    while time.perf_counter() - t0 < seconds:
        for _ in range(200):
            _, _, terminated, truncated, _ = env.step(action)
            steps += 1
            if terminated or truncated:
                env.reset()
    rate = steps / (time.perf_counter() - t0)
    env.close()
    return rate


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--handoffs", type=int, default=20)
    parser.add_argument("--episodes", type=int, default=1000)
    args = parser.parse_args(argv)

    from kinetome.library.checker import CheckOptions, load_chain, prepare_context, run_check

    with tempfile.TemporaryDirectory() as tmp:
        path = _chain_file(Path(tmp), args.handoffs, args.episodes)
        chain = load_chain(path)
        t0 = time.perf_counter()
        auto_ctx = prepare_context(chain, store=None, options=CheckOptions(method="auto", workers=1))
        prepare_s = time.perf_counter() - t0
        t0 = time.perf_counter()
        auto = run_check(auto_ctx)
        auto_s = time.perf_counter() - t0
        sim_ctx = prepare_context(chain, store=None, options=CheckOptions(method="sim", workers=1))
        t0 = time.perf_counter()
        sim = run_check(sim_ctx)
        sim_s = time.perf_counter() - t0
    stats = sim.whole_chain
    env_steps = sum(t.ran * t.duration_mean for t in stats.skills if t.ran)
    sim_rate = env_steps / sim.timings["sim"]
    gym_rate = _gym_steps_per_second(3.0)
    proved = sum(h.evidence_of("static").details.get("containment") == "proved" for h in auto.handoffs)
    agree = auto.exit_code == sim.exit_code and [h.verdict for h in auto.handoffs] == [h.verdict for h in sim.handoffs]

    print(f"chain: {args.handoffs} handoffs, containment proved for {proved}; auto ran {auto.whole_chain.episodes} episodes "
          f"({auto.whole_chain.stages}), exit {auto.exit_code}; sim ran {stats.episodes} episodes, {stats.success.k} completed, "
          f"exit {sim.exit_code}; verdicts agree: {agree}; preparing the chain (skills, rig) took {prepare_s:.2f} s "
          f"(static {auto.timings.get('static', 0):.2f} s, auto's simulation {auto.timings.get('sim', 0):.2f} s)",
          file=sys.stderr, flush=True)
    print("| measurement | kinetome | reference | ratio | target |")
    print("| --- | --- | --- | --- | --- |")
    print(f"| auto check vs simulation check, {args.handoffs} handoffs | {auto_s:.2f} s ({auto.whole_chain.episodes} episodes run) "
          f"| {sim_s:.2f} s ({args.episodes} episodes) | {100 * auto_s / sim_s:.1f}% | < 15% |")
    print(f"| simulation check throughput, 1 thread | {sim_rate:,.0f} env steps/s | {gym_rate:,.0f} env steps/s "
          f"(gymnasium env.step) | {sim_rate / gym_rate:.2f}x | >= 1.0x |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

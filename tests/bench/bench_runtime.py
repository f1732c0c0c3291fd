"""Benchmark: rollout throughput of run_skill (batched, predicates every step) vs gymnasium's env.step loop.

Run by hand (not collected by pytest):

    python tests/bench/bench_runtime.py [--episodes 128] [--rounds 7] [--envs kinetome/BenchArm-v0,Hopper-v5]
                                        [--kinds pd,mlp] [--max-steps 250] [--ref-steps 5000] [--profile ENV:KIND:W]
                                        [--torch-threads N] [--blas-matvec]

For each env, a PD skill and an MLP skill (inputs [qpos, qvel], hidden [64, 64])
run ``--episodes`` episodes from ``sample_starts`` through ``run_skill`` on 1 and 2
threads. ``stops_when`` is made unreachable so episodes run ``--max-steps`` steps,
``starts_when`` and ``stops_when`` are still evaluated every step; Hopper may
still terminate when it falls, so throughput counts only the steps actually
simulated (sum of per-episode steps). The reference is
``gymnasium.make(env).step(constant action)`` in the same process.

The machine is shared and noisy, so every loop (run_skill per kind on 1 and 2
threads, MuJoCo's rollout module on 1 and 2 threads, the gymnasium loop, and the
raw simulator in one and in two OS processes: the machine's own parallel ceiling,
tests/bench/rounds.py) runs once per round, the order rotated each round, and the
table gives medians of per-round ratios with their min-max over ``--rounds`` rounds.

``--torch-threads N`` runs torch on N intra-op threads (default: torch's own
choice, what run_skill callers get today). ``--blas-matvec`` is a what-if: it
swaps the mlp kind's batch-invariant elementwise matvec for
torch.nn.functional.linear for this run only (results are then no longer
batch-size invariant), to show what that kernel costs.

Targets: one thread >= 1.0x the gymnasium loop; two threads >= 1.7x the
one-thread figure, and >= 90% of the 2-thread scaling of MuJoCo's own rollout module
on the same model and start states (open loop), measured in the same round (median
over rounds of the per-round share). Prints markdown tables.
"""

from __future__ import annotations

import argparse
import cProfile
import io
import os
import pstats
import re
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(Path(__file__).resolve().parent))
from rounds import RawSimulator, column, load, load_line, median, ratios, rollout_seconds, rollout_states, run_rounds, summary  # noqa: E402

ARM_PD_SPEC = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
NEVER = "norm(qvel) < -1.0"  # a norm is never negative: episodes run max_steps (or until the env terminates)

HOPPER_PD = """
name: bench-hopper-pd
description: Benchmark only; hold the hopper's joints near straight.
env: Hopper-v5
controller:
  kind: joint_pd
  parameters:
    setpoint: [-0.05, -0.05, 0.0]
    kp: [2.0, 2.0, 1.0]
    kd: [0.1, 0.1, 0.05]
starts_when: torso_height > 0.5
stops_when: {never}
max_steps: {max_steps}
"""

MLP = """
name: bench-{slug}-mlp
description: Benchmark only; an untrained two-layer policy.
env: {env}
controller:
  kind: mlp
  settings: {{inputs: [qpos, qvel], hidden: [64, 64]}}
starts_when: norm(qvel) < 1000
stops_when: {never}
max_steps: {max_steps}
"""


def _arm_pd_text(max_steps: int) -> str:
    text = ARM_PD_SPEC.read_text(encoding="utf-8")
    text, n_stop = re.subn(r"(?m)^stops_when:.*$", f"stops_when: {NEVER}", text)
    text, n_max = re.subn(r"(?m)^max_steps:.*$", f"max_steps: {max_steps}", text)
    if n_stop != 1 or n_max != 1:
        raise SystemExit(f"{ARM_PD_SPEC}: expected one stops_when and one max_steps line, got {n_stop} and {n_max}")
    return text


def spec_text(env_id: str, kind: str, max_steps: int) -> str:
    """The benchmark spec for (env, kind) as YAML text."""
    if kind == "mlp":
        slug = re.sub(r"[^a-z0-9]+", "-", env_id.lower()).strip("-")
        return MLP.format(slug=slug, env=env_id, never=NEVER, max_steps=max_steps)
    if env_id == "kinetome/BenchArm-v0":
        return _arm_pd_text(max_steps)
    if env_id == "Hopper-v5":
        return HOPPER_PD.format(never=NEVER, max_steps=max_steps)
    raise SystemExit(f"--envs: no PD spec for {env_id!r}; use kinetome/BenchArm-v0 or Hopper-v5")


def gym_loop(env_id: str, steps: int) -> float:
    """gymnasium.make(env).step(constant mid-range action) steps/s, resets included."""
    import gymnasium

    import kinetome.envs  # noqa: F401  (registers kinetome/* ids)

    env = gymnasium.make(env_id)
    env.reset(seed=0)
    space = env.action_space
    action = ((space.low + space.high) / 2).astype(space.dtype)
    for _ in range(100):  # warm-up
        if any(env.step(action)[2:4]):
            env.reset()
    t = time.perf_counter()
    for _ in range(steps):
        _, _, terminated, truncated, _ = env.step(action)
        if terminated or truncated:
            env.reset()
    rate = steps / (time.perf_counter() - t)
    env.close()
    return rate


def build(env_id: str, kind: str, max_steps: int, episodes: int):
    """(rig, loaded skill, starts) for one benchmark case."""
    from kinetome.envs import make_rig
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.library.spec_load import parse_spec_text

    rig = make_rig(env_id)
    skill = skill_from_spec(parse_spec_text(spec_text(env_id, kind, max_steps), source=f"<bench {env_id} {kind}>"), rig=rig)
    starts = sample_starts(rig, None, episodes, seed=0)
    return rig, skill, starts


def runtime_rate(rig, skill, starts, workers: int) -> tuple[float, int]:
    """(simulated env steps/s, steps) of one run_skill call."""
    from kinetome.library.runtime.execute import run_skill

    t = time.perf_counter()
    out = run_skill(skill, rig, starts=starts, seed=0, workers=workers)
    wall = time.perf_counter() - t
    steps = int(out.segments[0].steps.sum())
    return steps / wall, steps


def rollout_rate(rig, starts, nstep: int, nthread: int) -> float:
    """MuJoCo's own rollout module on the same model and start states, open loop (zero controls):
    physics steps/s on ``nthread`` threads (1: the caller's thread only)."""
    qpos, qvel = starts
    return qpos.shape[0] * nstep / rollout_seconds(rig.model, rollout_states(rig.model, qpos, qvel), nstep, nthread, warm=True)


def profile(rig, skill, starts, workers: int, top: int) -> str:
    from kinetome.library.runtime.execute import run_skill

    prof = cProfile.Profile()
    prof.enable()
    run_skill(skill, rig, starts=starts, seed=0, workers=workers)
    prof.disable()
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(top)
    return buf.getvalue()


def configs_for(env_id: str, a, kinds: list[str], workers: list[int]) -> dict[str, object]:
    """The timed loops of one env, each returning steps/s, keyed 'ENV|what|threads'."""
    out: dict[str, object] = {}
    first = None  # the first kind's rig and start states: the rollout reference runs on them
    for kind in kinds:
        rig, skill, starts = build(env_id, kind, a.max_steps, a.episodes)
        first = first or (rig, starts)
        runtime_rate(rig, skill, (starts[0][:8], starts[1][:8]), 1)  # warm-up (torch, thread pool)
        for w in workers:
            out[f"{env_id}|{kind}|{w}"] = (lambda rig=rig, skill=skill, starts=starts, w=w: runtime_rate(rig, skill, starts, w)[0])
    rig, starts = first
    nstep = a.max_steps * rig.frame_skip // 2
    for w in workers:
        out[f"{env_id}|rollout|{w}"] = (lambda rig=rig, starts=starts, w=w: rollout_rate(rig, starts, nstep, w))
    out[f"{env_id}|gym|1"] = lambda: gym_loop(env_id, a.ref_steps)
    return out


def report(runs: list[dict], envs: list[str], kinds: list[str], workers: list[int], a) -> None:
    col = lambda k: column(runs, k)  # noqa: E731
    per = lambda num, den: ratios(runs, num, den)  # noqa: E731
    top = max(workers)
    print("| loop | steps/s (median) | vs gymnasium, median [min-max] | vs 1 thread, median [min-max] |")
    print("| --- | ---: | ---: | ---: |")
    for env_id in envs:
        print(f"| {env_id}: gymnasium env.step, constant action | {median(col(f'{env_id}|gym|1')):,.0f} | 1.00 | - |")
        for what in ("rollout", *kinds):
            for w in workers:
                key = f"{env_id}|{what}|{w}"
                label = (f"{env_id}: mujoco.rollout open loop, {a.episodes} states (physics steps/s)" if what == "rollout"
                         else f"{env_id}: run_skill {what}, {a.episodes} episodes")
                vs_gym = "-" if what == "rollout" else summary(per(key, f"{env_id}|gym|1"))
                vs_one = "-" if w == 1 else summary(per(key, f"{env_id}|{what}|1"))
                print(f"| {label}, {w} thread{'s' if w > 1 else ''} | {median(col(key)):,.0f} | {vs_gym} | {vs_one} |")
    if "raw1" in runs[0]:
        print(f"| ceiling: raw simulator ({envs[0]}), 2 OS processes vs 1 | - | - | {summary(per('raw2', 'raw1'))} |")
    if top == 1:
        return
    print()
    print(f"Scaling target (issue 18): run_skill's {top}-thread scaling >= 90% of mujoco.rollout's, same round:")
    for env_id in envs:
        roll = per(f"{env_id}|rollout|{top}", f"{env_id}|rollout|1")
        for kind in kinds:
            own = per(f"{env_id}|{kind}|{top}", f"{env_id}|{kind}|1")
            share = [o / r for o, r in zip(own, roll)]
            verdict = "met" if median(share) >= 0.9 else "missed"
            print(f"- {env_id} {kind}: {summary(own)}x vs rollout {summary(roll)}x = {summary(share)} of it "
                  f"({verdict} at the median; met in {sum(x >= 0.9 for x in share)} of {len(share)} rounds)")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--envs", default="kinetome/BenchArm-v0,Hopper-v5")
    ap.add_argument("--kinds", default="pd,mlp")
    ap.add_argument("--workers", default="1,2")
    ap.add_argument("--episodes", type=int, default=128)
    ap.add_argument("--max-steps", type=int, default=250)
    ap.add_argument("--ref-steps", type=int, default=5000)
    ap.add_argument("--rounds", type=int, default=7, help="interleaved rounds (>= 5 advised); medians of per-round ratios")
    ap.add_argument("--no-ceiling", action="store_true", help="skip the raw simulator in one and two OS processes")
    ap.add_argument("--profile", default="", help="ENV:KIND:WORKERS to print a cProfile of (after the rounds), e.g. Hopper-v5:mlp:1")
    ap.add_argument("--top", type=int, default=25)
    ap.add_argument("--torch-threads", type=int, default=0, help="torch intra-op threads (0: leave torch's default)")
    ap.add_argument("--blas-matvec", action="store_true", help="what-if: mlp layers via F.linear (see above)")
    a = ap.parse_args()
    import torch

    if a.torch_threads > 0:
        torch.set_num_threads(a.torch_threads)
    if a.blas_matvec:
        import torch.nn.functional as F

        import kinetome.library.controllers.mlp as mlp

        mlp.matvec = lambda x, w: F.linear(x, w)
    load_before = load()
    envs = [e for e in a.envs.split(",") if e]
    kinds = [k for k in a.kinds.split(",") if k]
    workers = [int(w) for w in a.workers.split(",") if w]
    bad = [k for k in kinds if k not in ("pd", "mlp")]
    if bad or 1 not in workers:
        raise SystemExit(f"--kinds must be pd and/or mlp (got {kinds}); --workers must include 1 (got {workers})")

    configs: dict[str, object] = {}
    for env_id in envs:
        configs.update(configs_for(env_id, a, kinds, workers))
    raw = None if a.no_ceiling else RawSimulator(envs[0], seconds=1.0)
    if raw is not None:
        configs.update(raw1=raw.one, raw2=raw.two)
    loads: list[float] = []

    def progress(r: int, m: dict) -> None:
        loads.append(os.getloadavg()[0])
        top = max(workers)
        parts = [f"{e.split('/')[-1]} {k} {m[f'{e}|{k}|{top}'] / m[f'{e}|{k}|1']:.2f}x" for e in envs for k in ("rollout", *kinds)]
        if raw is not None:
            parts.append(f"raw 2 processes {m['raw2'] / m['raw1']:.2f}x")
        print(f"round {r + 1}: {', '.join(parts)}; load {loads[-1]:.2f}", file=sys.stderr, flush=True)

    try:
        runs = run_rounds(configs, a.rounds, on_round=progress)
    finally:
        if raw is not None:
            raw.close()
    print(f"torch intra-op threads {torch.get_num_threads()}{', BLAS matvec (what-if)' if a.blas_matvec else ''}; "
          f"{load_line(load_before, loads)}; {a.rounds} rounds, order rotated each round")
    print()
    report(runs, envs, kinds, workers, a)
    if a.profile:
        p_env, p_kind, p_w = a.profile.rsplit(":", 2)
        rig, skill, starts = build(p_env, p_kind, a.max_steps, a.episodes)
        runtime_rate(rig, skill, (starts[0][:8], starts[1][:8]), 1)
        print(profile(rig, skill, starts, int(p_w), a.top))


if __name__ == "__main__":
    main()

"""Retraining vs training from scratch on the bench arm's heavy payload variant.

The parent is ``configs/skills/arm-reach-tray.yaml``; its success rate on the
nominal arm (from the end states of ``arm-lift``, the clearance pose) is the
target. Both runs use ``configs/training/arm_heavy_payload.yaml`` with an
evaluation after every update; we count env steps until the success rate on
the heavy variant reaches the parent's nominal rate. Retraining gets the
config's budget, from-scratch five times that. Target: retraining needs at
most 1/5 of the steps from scratch needs (or scratch fails within 5x).
From scratch re-initialises every parameter to its kind's default, else the
middle of its bounds (``reinitialise_controller``).

    python tests/bench/bench_retrain.py [--seed 0] [--episodes 32]
"""

from __future__ import annotations

import argparse
import dataclasses
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def clearance_starts(n: int, seed: int):
    from kinetome.envs import make_rig
    from kinetome.library.runtime.execute import run_skill
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.library.spec_load import load_spec

    nominal = make_rig("kinetome/BenchArm-v0")
    lift = skill_from_spec(load_spec(ROOT / "configs/skills/arm-lift.yaml"), rig=nominal)
    seg = run_skill(lift, nominal, starts=sample_starts(nominal, None, n, seed=seed), seed=seed).segments[0]
    ok = seg.reason == 0
    return (seg.end_state["qpos"][ok], seg.end_state["qvel"][ok]), nominal


def steps_to_target(skill, rig, cfg, start, target: float, seed: int, from_scratch: bool):
    from kinetome.trainers import StopTraining, retrain_skill

    reached: dict[str, int] = {}

    def watch(row):
        if row.get("eval_success_rate", -1.0) >= target and "steps" not in reached:
            reached["steps"] = row["env_steps"]
            raise StopTraining

    t = time.perf_counter()
    res = retrain_skill(skill, rig, cfg, start=start, seed=seed, progress=watch, from_scratch=from_scratch)
    return reached.get("steps"), res, time.perf_counter() - t


def main() -> None:
    from kinetome.envs import make_rig
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.spec_load import load_spec
    from kinetome.trainers import evaluate_skill, load_train_config

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--episodes", type=int, default=32)
    a = ap.parse_args()
    start, nominal = clearance_starts(64, a.seed)
    spec = load_spec(ROOT / "configs/skills/arm-reach-tray.yaml")
    parent_nominal = evaluate_skill(skill_from_spec(spec, rig=nominal), nominal, start=start, episodes=a.episodes, seed=a.seed)
    heavy = make_rig("kinetome/BenchArm-v0", variant=ROOT / "configs/variants/heavy_payload.yaml")
    parent = skill_from_spec(spec, rig=heavy)
    base = load_train_config(ROOT / "configs/training/arm_heavy_payload.yaml")
    base = dataclasses.replace(base, eval_every=1, eval_episodes=a.episodes, checkpoint_every=0)
    target = parent_nominal.success_rate
    retrain_steps, retrained, t_re = steps_to_target(parent, heavy, base, start, target, a.seed, False)
    scratch_cfg = dataclasses.replace(base, env_step_budget=5 * base.env_step_budget)
    scratch_steps, scratch, t_sc = steps_to_target(parent, heavy, scratch_cfg, start, target, a.seed, True)
    fmt = lambda s: "not reached" if s is None else f"{s:,}"
    if retrain_steps is not None and scratch_steps is not None:
        ratio = f"{retrain_steps / scratch_steps:.3f}"
    elif retrain_steps is not None:
        ratio = f"< {retrain_steps / scratch_cfg.env_step_budget:.3f} (scratch failed within 5x)"
    else:
        ratio = "retraining failed"
    print(f"parent on nominal: success {parent_nominal.success_rate:.2f}; on heavy before retraining: {retrained.before.success_rate:.2f}")
    print("| task | target success | retrain steps | from-scratch steps (budget) | ratio | wall s (retrain / scratch) |")
    print("| --- | --- | --- | --- | --- | --- |")
    print(f"| arm-reach-tray, heavy_payload, seed {a.seed} | {target:.2f} | {fmt(retrain_steps)} | "
          f"{fmt(scratch_steps)} ({scratch_cfg.env_step_budget:,}) | {ratio} | {t_re:.0f} / {t_sc:.0f} |")


if __name__ == "__main__":
    main()

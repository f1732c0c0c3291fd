"""Walker on the waxed floor: parameter search (CMA-ES) against the actor-critic, equal env-step budget, fixed seeds.

Retrains the test walker's oscillator gait (``walker-walk``) on the
low-friction variant from the standing initial states with each method and
the same env-step budget (``--budget``, default 102,400 = the shipped
config's), seeds fixed in advance. Each result is judged on 200 fresh
episodes (seed 10,000 + run seed): the success criterion is the skill's own
``stops_when`` (one metre of travel) in at least ``--bar`` of them (default
0.9), the same for both methods. Finished runs go to ``runs.csv`` in
``--out`` (a rerun skips them); the table is printed and written to ``table.md``.

    python tests/bench/bench_walker_search.py [--budget 102400] [--seeds 0 1 2] [--methods search actor-critic] [--out bench-walker]
"""

from __future__ import annotations

import argparse
import copy
import csv
import dataclasses
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
CONFIG = ROOT / "configs" / "training" / "walker_low_friction.yaml"
FIELDS = ("method", "seed", "budget", "env_steps", "success_before", "successes", "episodes", "success_rate", "mean_return", "wall_s")


def run(method: str, seed: int, budget: int) -> dict:
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.spec_load import load_spec
    from kinetome.library.tasks import load_start_file, load_variant_file, task_rig
    from kinetome.trainers.config import load_train_file
    from kinetome.trainers.evaluate import evaluate_skill
    from kinetome.trainers.retrain import retrain_skill

    loaded = load_train_file(CONFIG)
    rig = task_rig(loaded.task.env, load_variant_file(loaded.task.variant))
    start = load_start_file(loaded.task.initial_states)
    skill = skill_from_spec(load_spec(ROOT / "configs" / "skills" / "walker-walk.yaml"), ref="walker-walk", rig=rig)
    cfg = dataclasses.replace(loaded.config, env_step_budget=budget, checkpoint_every=0, eval_every=0)
    t0 = time.perf_counter()
    result = retrain_skill(skill, rig, cfg, start=start, seed=seed, method=method)
    wall = time.perf_counter() - t0
    controller = copy.deepcopy(skill.controller)
    controller.load_values(result.parameters)
    work = dataclasses.replace(skill, controller=controller)
    judged = evaluate_skill(work, rig, start=start, episodes=200, seed=10_000 + seed, gamma=cfg.gamma)
    return {"method": method, "seed": seed, "budget": budget, "env_steps": result.steps,
            "success_before": round(result.before.success_rate, 3), "successes": int(round(judged.success_rate * 200)),
            "episodes": 200, "success_rate": round(judged.success_rate, 3), "mean_return": round(judged.mean_return, 1),
            "wall_s": round(wall)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=int, default=102_400)
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2])
    ap.add_argument("--methods", nargs="+", default=["search", "actor-critic"])
    ap.add_argument("--bar", type=float, default=0.9)
    ap.add_argument("--out", type=Path, default=Path("bench-walker"))
    a = ap.parse_args()
    a.out.mkdir(parents=True, exist_ok=True)
    runs = a.out / "runs.csv"
    done = {(r["method"], int(r["seed"]), int(r["budget"])): r for r in csv.DictReader(runs.open())} if runs.exists() else {}
    for method in a.methods:
        for seed in a.seeds:
            if (method, seed, a.budget) in done:
                continue
            row = run(method, seed, a.budget)
            new = not runs.exists()
            with runs.open("a", newline="") as f:
                w = csv.DictWriter(f, fieldnames=FIELDS)
                if new:
                    w.writeheader()
                w.writerow(row)
            done[(method, seed, a.budget)] = row
            print(f"{method} seed {seed}: {row['successes']}/200 (before {row['success_before']}), {row['wall_s']} s", flush=True)
    lines = [f"| method | seed | env steps | success on 200 fresh episodes | mean return | meets {a.bar:.0%} |",
             "| --- | --- | --- | --- | --- | --- |"]
    for method in a.methods:
        wins = 0
        for seed in a.seeds:
            r = done[(method, seed, a.budget)]
            ok = float(r["success_rate"]) >= a.bar
            wins += ok
            lines.append(f"| {method} | {seed} | {int(r['env_steps']):,} | {r['successes']}/200 = {float(r['success_rate']):.3f} | "
                         f"{float(r['mean_return']):.1f} | {'yes' if ok else 'no'} |")
        lines.append(f"| {method} | all | budget {a.budget:,} | {wins} of {len(a.seeds)} seeds meet the bar | | |")
    text = "\n".join(lines) + "\n"
    (a.out / "table.md").write_text(text)
    print(text)


if __name__ == "__main__":
    main()

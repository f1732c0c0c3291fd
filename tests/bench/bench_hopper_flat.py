"""Flat mode on Hopper-v5: final return per seed (deterministic evaluation on gymnasium's env) beside a published PPO figure.

Trains an mlp controller (inputs qpos, qvel; 64x64 tanh, orthogonal init) for
``--budget`` env steps per seed with the clipped-surrogate details on
(observation and reward normalisation, learning-rate annealing, advantage
standardisation, critic clipping, gradient-norm cap, minibatches of 64), then
scores it on gymnasium's own Hopper-v5: mean action, 10 episodes with fixed
seeds 10000..10009. Reference: PPO at 1M steps on Hopper, about 2,160 in
Fujimoto, van Hoof & Meger 2018 (TD3 paper), Table 1 (from memory; the best
average return during training on an older env version, so a rough band only).
Each finished seed is appended to ``runs.csv`` in ``--out`` (a rerun skips it)
with its curve (``curve-<seed>.csv``); the table and ``hopper.png`` cover all.

    python tests/bench/bench_hopper_flat.py [--budget 1000000] [--seeds 0 1 2 3 4] [--workers 1] [--out bench-hopper]
"""

from __future__ import annotations

import argparse
import csv
import time
from pathlib import Path

import numpy as np

PUBLISHED_PPO_1M = 2160.0  # Fujimoto et al. 2018, Table 1, PPO on Hopper (from memory)
EVAL_SEEDS = tuple(range(10_000, 10_010))


def score(ctrl) -> float:
    """Mean return on gymnasium's Hopper-v5 with the mean action, one episode per seed in EVAL_SEEDS."""
    import gymnasium

    env = gymnasium.make("Hopper-v5")
    data = env.unwrapped.data
    returns = []
    for seed in EVAL_SEEDS:
        env.reset(seed=seed)
        total, done = 0.0, False
        while not done:
            action = ctrl.act({"qpos": data.qpos[None].copy(), "qvel": data.qvel[None].copy()}, np.zeros(1))[0]
            _, reward, terminated, truncated, _ = env.step(action)
            total += reward
            done = terminated or truncated
        returns.append(total)
    return float(np.mean(returns))


def run(seed: int, steps: int, workers: int) -> tuple[float, float, float, list[dict]]:
    from kinetome.envs import make_rig
    from kinetome.library.controllers import build_controller, context_from_rig
    from kinetome.trainers import OptionCriticTrainer, TrainConfig, flat_skill

    rig = make_rig("Hopper-v5")
    ctrl = build_controller("mlp", context_from_rig(rig),
                            settings={"inputs": ["qpos", "qvel"], "hidden": [64, 64], "init_seed": seed, "init": "orthogonal"},
                            exploration_std=1.0)
    # Common-practice clipped-surrogate settings for MuJoCo locomotion: 2048 samples per update,
    # 10 passes in minibatches of 64, learning rate 3e-4 annealed to 0, critic clipped at 0.2.
    cfg = TrainConfig(env_step_budget=steps, parallel_envs=16, segment_steps=128, update_passes=10, minibatch_size=64,
                      learning_rate=3e-4, learning_rate_schedule="linear", gamma=0.99, lambda_=0.95, clip_ratio=0.2,
                      critic_loss_weight=0.5, critic_clip=0.2, gradient_norm_cap=0.5, checkpoint_every=0, seed=seed)
    trainer = OptionCriticTrainer([flat_skill(ctrl, max_steps=rig.max_episode_steps)], rig, cfg,
                                  episode_per_skill=True, workers=workers)
    t = time.perf_counter()
    out = trainer.run()
    wall = time.perf_counter() - t
    last = [r["return_mean"] for r in out.rows[-10:] if r["return_mean"] == r["return_mean"]]
    return score(ctrl), float(np.mean(last)) if last else float("nan"), wall, out.rows


def _plot(out: Path, seeds: list[int]) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from kinetome.library.safety import CAUTION

    fig, ax = plt.subplots(figsize=(6.5, 3.8))
    for seed in seeds:
        path = out / f"curve-{seed}.csv"
        if path.exists():
            rows = list(csv.DictReader(path.open()))
            ax.plot([int(r["env_steps"]) for r in rows], [float(r["return_mean"] or "nan") for r in rows], lw=1, label=f"seed {seed}")
    ax.axhline(PUBLISHED_PPO_1M, color="k", ls="--", lw=1, label="published PPO @1M (~2,160)")
    ax.set(xlabel="env steps", ylabel="training return (episodes ended in the update)", title="flat Hopper-v5")
    ax.legend(fontsize=7)
    fig.text(0.01, 0.01, CAUTION.split(".")[0] + ".", fontsize=6)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    fig.savefig(out / "hopper.png", dpi=120)
    plt.close(fig)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--budget", type=int, default=1_000_000)
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2, 3, 4])
    ap.add_argument("--workers", type=int, default=1)
    ap.add_argument("--out", type=Path, default=Path("bench-hopper"))
    a = ap.parse_args()
    a.out.mkdir(parents=True, exist_ok=True)
    runs = a.out / "runs.csv"
    done = {int(r["seed"]): r for r in csv.DictReader(runs.open())} if runs.exists() else {}
    for seed in a.seeds:
        if seed in done:
            continue
        final, training, wall, rows = run(seed, a.budget, a.workers)
        with (a.out / f"curve-{seed}.csv").open("w", newline="") as f:
            w = csv.DictWriter(f, fieldnames=list(rows[0]))
            w.writeheader()
            w.writerows(rows)
        new = not runs.exists()
        with runs.open("a", newline="") as f:
            w = csv.DictWriter(f, fieldnames=["seed", "budget", "final", "training", "wall_s"])
            if new:
                w.writeheader()
            w.writerow({"seed": seed, "budget": a.budget, "final": round(final, 1), "training": round(training, 1), "wall_s": round(wall)})
        done[seed] = {"seed": seed, "budget": a.budget, "final": final, "training": training, "wall_s": wall}
        print(f"seed {seed}: final {final:,.0f}  training {training:,.0f}  ({wall:,.0f} s)", flush=True)
    finals = [float(done[s]["final"]) for s in a.seeds]
    print("| seed | steps | final return (gymnasium, mean action, seeds 10000-10009) | training return (last 10 updates) | wall s |")
    print("| --- | --- | --- | --- | --- |")
    for s in a.seeds:
        r = done[s]
        print(f"| {s} | {int(r['budget']):,} | {float(r['final']):,.0f} | {float(r['training']):,.0f} | {float(r['wall_s']):,.0f} |")
    print(f"\nmean {np.mean(finals):,.0f}, median {np.median(finals):,.0f}, worst {np.min(finals):,.0f} "
          f"(published PPO @1M ~{PUBLISHED_PPO_1M:,.0f})")
    _plot(a.out, a.seeds)


if __name__ == "__main__":
    main()

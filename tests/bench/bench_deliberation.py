"""Deliberation cost on our robots: mean skill duration and return against eta, over seeds fixed in advance.

Trains the skills of an options config (default the shipped bench-arm config)
once per (eta, seed), then measures with action noise off and greedy choice
(stop heads stay stochastic): mean skill duration (a skill's turn runs from
its selection to its own stop or a switch; choosing it again after a forced
stop continues it), stop rate and mean return. Reports per eta the mean and
95% t-interval over seeds, the paired rise over the first eta (per-seed
differences, 95% t-interval), Page's trend test of duration on eta (seeds as blocks),
and whether each eta's mean return stays within the band (default 10%) of
eta 0. Writes ``runs.csv`` (one row per run; finished runs are skipped on a
rerun), ``table.md`` and ``deliberation.png`` to ``--out``.

    python tests/bench/bench_deliberation.py [--config configs/training/options_small.yaml]
        [--etas 0 0.01 0.05 0.2] [--seeds 0 1 2 3 4] [--budget N] [--out bench-deliberation]
"""

from __future__ import annotations

import argparse
import csv
import dataclasses
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
FIELDS = ("eta", "seed", "mean_skill_duration", "termination_rate", "mean_return", "wall_s")


def train_once(config_path: Path, eta: float, seed: int, budget: int | None) -> dict[str, float]:
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.spec_load import load_spec
    from kinetome.library.tasks import load_start_file, load_variant_file, task_rig
    from kinetome.trainers.config import TrainTask, load_train_file
    from kinetome.trainers.train_set import train_skills

    loaded = load_train_file(config_path)
    task = loaded.task or TrainTask()
    specs = [load_spec(ROOT / "configs" / "skills" / f"{name.split('@')[0]}.yaml") for name in loaded.skills]
    rig = task_rig(task.env or specs[0].env, load_variant_file(task.variant))
    skills = [skill_from_spec(spec, ref=spec.name, rig=rig) for spec in specs]
    cfg = dataclasses.replace(loaded.config, deliberation_cost=float(eta), checkpoint_every=0,
                              **({"env_step_budget": budget} if budget else {}))
    t0 = time.perf_counter()
    result = train_skills(skills, rig, cfg, start=load_start_file(task.initial_states), seed=seed)
    return {"eta": eta, "seed": seed, "mean_skill_duration": result.mean_skill_duration,
            "termination_rate": result.termination_rate, "mean_return": result.mean_return,
            "wall_s": round(time.perf_counter() - t0, 1)}


def t_interval(values: np.ndarray) -> tuple[float, float, float]:
    """(mean, low, high): the 95% t-interval of the mean (Student t, scipy.stats.t); nan bounds below two values."""
    from scipy import stats

    if len(values) == 0:
        return float("nan"), float("nan"), float("nan")
    mean = float(values.mean())
    half = stats.t.ppf(0.975, len(values) - 1) * values.std(ddof=1) / np.sqrt(len(values)) if len(values) > 1 else float("nan")
    return mean, mean - half, mean + half


def summarise(rows: list[dict[str, float]], etas: list[float], band: float) -> tuple[list[dict], dict]:
    from scipy import stats

    table = []
    base = np.mean([r["mean_return"] for r in rows if r["eta"] == etas[0]])
    for eta in etas:
        d = np.array([r["mean_skill_duration"] for r in rows if r["eta"] == eta])
        ret = np.array([r["mean_return"] for r in rows if r["eta"] == eta])
        duration, low, high = t_interval(d)  # over seeds
        table.append({"eta": eta, "seeds": len(d), "duration": duration, "low": low, "high": high,
                      "return": ret.mean(), "return_low": ret.min(), "return_high": ret.max(),
                      "within_band": bool(abs(ret.mean() - base) <= band * abs(base))})
    # Trend: seeds are blocks fixed in advance, etas the ordered treatments: Page's L test for a rising
    # duration (Page 1963; scipy.stats.page_trend_test), plus Kendall's tau over all runs for reference.
    seeds = sorted({int(r["seed"]) for r in rows})
    grid = {(r["eta"], int(r["seed"])): r["mean_skill_duration"] for r in rows}
    blocks = [[grid[(eta, s)] for eta in etas] for s in seeds if all((eta, s) in grid for eta in etas)]
    page = stats.page_trend_test(blocks) if len(blocks) >= 2 and len(etas) >= 3 else None
    for k, t in enumerate(table):  # rise over the first eta within each seed: paired, so seed-to-seed spread cancels
        diff = np.array([b[k] - b[0] for b in blocks])
        rise, rise_low, rise_high = t_interval(diff)
        t.update(rise=rise, rise_low=rise_low, rise_high=rise_high, rise_seeds=int(np.sum(diff > 0)), rise_pairs=len(diff))
    tau = stats.kendalltau([r["eta"] for r in rows], [r["mean_skill_duration"] for r in rows], alternative="greater")
    return table, {"L": float(page.statistic) if page else float("nan"), "p": float(page.pvalue) if page else float("nan"),
                   "tau": float(tau.statistic), "p_tau": float(tau.pvalue), "seeds": len(blocks), "runs": len(rows)}


def markdown(table: list[dict], trend: dict, band: float) -> str:
    first = f"{table[0]['eta']:g}"
    lines = [f"| eta | seeds | mean skill duration (95% CI) | rise over eta {first}, paired (95% CI; seeds longer) | "
             f"mean return (min to max) | within {band:.0%} of eta {first} |", "| --- | --- | --- | --- | --- | --- |"]
    for k, t in enumerate(table):
        rise = "-" if k == 0 else f"{t['rise']:+.1f} ({t['rise_low']:+.1f} to {t['rise_high']:+.1f}; {t['rise_seeds']} of {t['rise_pairs']})"
        lines.append(f"| {t['eta']:g} | {t['seeds']} | {t['duration']:.1f} ({t['low']:.1f} to {t['high']:.1f}) | {rise} | "
                     f"{t['return']:.1f} ({t['return_low']:.1f} to {t['return_high']:.1f}) | {'yes' if t['within_band'] else 'NO'} |")
    lines.append(f"\nTrend in duration (Page's L test, {trend['seeds']} seeds as blocks, etas in order): "
                 f"L = {trend['L']:.1f}, p = {trend['p']:.2g}; Kendall's tau over {trend['runs']} runs: "
                 f"tau = {trend['tau']:.2f}, p = {trend['p_tau']:.2g} (one-sided)")
    return "\n".join(lines) + "\n"


def plot(table: list[dict], path: Path, title: str) -> None:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from kinetome.library.safety import CAUTION

    etas = [t["eta"] for t in table]
    pos = np.arange(len(etas))
    fig, (a, b) = plt.subplots(1, 2, figsize=(9, 3.6))
    a.errorbar(pos, [t["duration"] for t in table], yerr=[[t["duration"] - t["low"] for t in table],
               [t["high"] - t["duration"] for t in table]], fmt="o-", capsize=4)
    a.set(xticks=pos, xticklabels=[f"{e:g}" for e in etas], xlabel="deliberation cost eta",
          ylabel="mean skill duration (steps)", title="duration, 95% CI over seeds")
    b.errorbar(pos, [t["return"] for t in table], yerr=[[t["return"] - t["return_low"] for t in table],
               [t["return_high"] - t["return"] for t in table]], fmt="s-", capsize=4, color="tab:green")
    b.set(xticks=pos, xticklabels=[f"{e:g}" for e in etas], xlabel="deliberation cost eta",
          ylabel="mean return", title="return (min to max over seeds)")
    fig.suptitle(title)
    fig.text(0.01, 0.01, CAUTION.split(".")[0] + ".", fontsize=6)
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    fig.savefig(path, dpi=120)
    plt.close(fig)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", type=Path, default=ROOT / "configs" / "training" / "options_small.yaml")
    ap.add_argument("--etas", type=float, nargs="+", default=[0.0, 0.01, 0.05, 0.2])
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2, 3, 4])
    ap.add_argument("--budget", type=int, help="env steps per run (default: the config's)")
    ap.add_argument("--band", type=float, default=0.10, help="allowed relative return change from the first eta")
    ap.add_argument("--out", type=Path, default=Path("bench-deliberation"))
    a = ap.parse_args()
    a.out.mkdir(parents=True, exist_ok=True)
    runs_path = a.out / "runs.csv"
    rows = []
    if runs_path.exists():
        with runs_path.open() as f:
            rows = [{k: float(v) for k, v in r.items()} for r in csv.DictReader(f)]
    done = {(r["eta"], int(r["seed"])) for r in rows}
    for eta in a.etas:
        for seed in a.seeds:
            if (eta, seed) in done:
                continue
            row = train_once(a.config, eta, seed, a.budget)
            rows.append(row)
            new = not runs_path.exists()
            with runs_path.open("a", newline="") as f:
                w = csv.DictWriter(f, fieldnames=FIELDS)
                if new:
                    w.writeheader()
                w.writerow(row)
            print(f"eta {eta:g} seed {seed}: duration {row['mean_skill_duration']:.2f}  return {row['mean_return']:.1f}  "
                  f"({row['wall_s']:.0f} s)", flush=True)
    rows = [r for r in rows if r["eta"] in a.etas and int(r["seed"]) in a.seeds]
    table, trend = summarise(rows, a.etas, a.band)
    text = markdown(table, trend, a.band)
    (a.out / "table.md").write_text(text)
    plot(table, a.out / "deliberation.png", f"{a.config.stem}: deliberation cost, seeds {a.seeds}")
    print(text)


if __name__ == "__main__":
    main()

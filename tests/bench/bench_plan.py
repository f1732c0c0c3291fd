"""Benchmark the chain search (run by hand: python tests/bench/bench_plan.py).

Library: the 4 shipped bench-arm skills plus 26 generated variants = 30 skills. The generated
ones move the arm through four joint-space waypoints from the home pose to a raised pose; the
goal (at rest within 0.15 rad of the last waypoint) is first reachable at depth 4. Per stage:
the main skill, a jerkier (underdamped, slower to settle) one, a more damped one and a soft one
(a third of the gains, a tight stop) that both time out in this rig, and a detour to a dead-end
pose that stops fast and reliably (a decoy); 4 "return" skills lead from each dead end back,
and 2 "fine" variants of stages 3 and 4 (a tighter stop; they time out too). Every skill gets option models fitted on this task from rollouts along the chains it
runs in (200 episodes each), so scoring is model-based on both sides.

Measured in the same run, on two copies of the same store (so neither reuses the other's
stored checks), in one process warmed by a throwaway plan on a third copy first (so neither
side pays Python's module imports; loading the library, ``build_problem``, is timed on both):

1. ``kinetome plan``'s path: problem, best-first search (top 1), check of the winner;
   candidates (sequences) scored per second.
2. Model-scored exhaustive enumeration of every sequence up to depth 4 (no skill right after
   itself, as the search), prefix particles shared and zero-mass subtrees scored 0 without
   model calls, ranked with the search's key, then the checker's simulation of its best 5.

Target: (1) takes at most 1/20 of (2)'s time. Prints markdown table rows.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

REPO = Path(__file__).resolve().parents[2]
HOME = np.array([0.0651, -0.9892, -0.6467])
RAISED = np.array([1.2, -0.2, 0.0])
WAY = [HOME + i / 4 * (RAISED - HOME) for i in range(5)]  # WAY[0] = home, WAY[4] = the goal pose
KP, KD = np.array([30.0, 20.0, 6.0]), np.array([3.0, 2.0, 0.3])
GOAL = f"norm(qpos - {WAY[4].round(4).tolist()}) < 0.15 and norm(qvel) < 0.05"


def _vec(x: np.ndarray) -> str:
    return str([round(float(v), 4) for v in x])


def _spec(name: str, start: np.ndarray, setpoint: np.ndarray, stop: np.ndarray, *, kp=KP, kd=KD, stop_radius=0.15) -> str:
    return (
        f"name: {name}\nenv: kinetome/BenchArm-v0\ncontroller:\n  kind: joint_pd\n  parameters:\n"
        f"    setpoint: {_vec(setpoint)}\n    kp: {_vec(kp)}\n    kd: {_vec(kd)}\n"
        f"starts_when: 'norm(qpos - {_vec(start)}) < 0.2 and norm(qvel) < 0.1'\n"
        f"stops_when: 'norm(qvel) < 0.05 and norm(qpos - {_vec(stop)}) < {stop_radius}'\nmax_steps: 150\n"
    )


def generated_specs(folder: Path) -> list[Path]:
    """26 generated skills (see the module docstring)."""
    specs: dict[str, str] = {}
    for i in range(1, 5):
        a, b = WAY[i - 1], WAY[i]
        dead = a + np.array([-0.35, 0.3, 0.35])
        specs[f"way-{i}"] = _spec(f"way-{i}", a, b, b)
        specs[f"way-{i}-slow"] = _spec(f"way-{i}-slow", a, b, b, kd=KD * np.array([2.5, 2.5, 1.0]))
        specs[f"way-{i}-jerky"] = _spec(f"way-{i}-jerky", a, b, b, kd=KD * 0.35)
        specs[f"way-{i}-soft"] = _spec(f"way-{i}-soft", a, b, b, kp=KP * 0.35, kd=KD * 0.6, stop_radius=0.05)
        specs[f"detour-{i}"] = _spec(f"detour-{i}", a, dead, dead, stop_radius=0.3)
        specs[f"return-{i}"] = _spec(f"return-{i}", dead, a, a).replace("norm(qpos - " + _vec(dead) + ") < 0.2", "norm(qpos - " + _vec(dead) + ") < 0.35")
    specs["way-4-fine"] = _spec("way-4-fine", WAY[3], WAY[4], WAY[4], kd=KD * np.array([1.5, 1.5, 1.0]), stop_radius=0.13)
    specs["way-3-fine"] = _spec("way-3-fine", WAY[2], WAY[3], WAY[3], kd=KD * np.array([1.5, 1.5, 1.0]), stop_radius=0.13)
    paths = []
    for name, text in specs.items():
        p = folder / f"{name}.yaml"
        p.write_text(text, encoding="utf-8")
        paths.append(p)
    return paths


def _fit(store, rig, refs, starts, seed, log) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Fit each ref's models from ``starts``; return each one's stopped end states (raw qpos, qvel)."""
    from kinetome.trainers.fitting import fit_option_models

    from kinetome.library.api import attach_models
    from kinetome.library.runtime.execute import run_chain
    from kinetome.library.runtime.skill import load_skill

    ends = {}
    for ref in refs:
        loaded = load_skill(store, ref, rig=rig)
        rollout = run_chain([loaded], rig, starts=starts, seed=seed)
        models = fit_option_models(rollout, 0, seed=seed, envelope=rig.layout, skill_ref=loaded.ref)
        attach_models(store, loaded.ref, models, rig=rig, settings={"bench": "plan", "seed": seed}, meta={"episodes": len(starts[0])})
        seg = rollout.segments[0]
        ok = seg.reason == 0
        ends[ref] = (seg.end_state["qpos"][ok], seg.end_state["qvel"][ok])
        log(f"  fitted {loaded.ref}: {int(ok.sum())}/{ok.size} stopped")
    return ends


def _resample(pair: tuple[np.ndarray, np.ndarray], n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rows = np.random.default_rng(seed).integers(0, len(pair[0]), n)
    return pair[0][rows], pair[1][rows]


def build_store(root: Path, episodes: int, seed: int, log) -> Path:
    from kinetome.library.api import open_store, register
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.library.tasks import load_start_file, task_rig

    store_dir = root / "store"
    store = open_store(store_dir)
    for p in sorted((REPO / "configs" / "skills").glob("arm-*.yaml")):
        register(p, store=store)
    for p in generated_specs(root):
        register(p, store=store)
    rig = task_rig("kinetome/BenchArm-v0")
    home = sample_starts(rig, load_start_file(REPO / "configs/initial_states/arm_home.yaml"), episodes, seed=seed)
    # shipped skills along the workshop chain; waypoint skills stage by stage
    ends = _fit(store, rig, ["arm-lift", "arm-reach-tray"], home, seed, log)
    ends |= _fit(store, rig, ["arm-place"], _resample(ends["arm-reach-tray"], episodes, seed), seed, log)
    at_tray = sample_starts(rig, load_start_file(REPO / "configs/initial_states/arm_at_tray.yaml"), episodes, seed=seed)
    _fit(store, rig, ["arm-release"], at_tray, seed, log)  # it refuses arm-place's end states: fit it on its usual ones
    starts = home
    for i in range(1, 5):
        refs = [f"way-{i}", f"way-{i}-slow", f"way-{i}-jerky", f"way-{i}-soft", f"detour-{i}"] + ([f"way-{i}-fine"] if i >= 3 else [])
        got = _fit(store, rig, refs, starts, seed, log)
        _fit(store, rig, [f"return-{i}"], _resample(got[f"detour-{i}"], episodes, seed), seed, log)
        # the next stage starts where any skill of this stage that stops puts the arm
        stopped = [got[r] for r in refs if r != f"detour-{i}" and len(got[r][0])]
        starts = _resample((np.concatenate([q for q, _ in stopped]), np.concatenate([v for _, v in stopped])), episodes, seed + i)
    return store_dir


def run_search(store_dir: Path, particles: int, seed: int) -> dict:
    from kinetome.library.api import open_store
    from kinetome.library.planning import SearchSettings, search_chains
    from kinetome.library.planning.confirm import ChainSettings, confirm_candidates
    from kinetome.library.planning.library_problem import PlanTask, build_problem

    store = open_store(store_dir)
    task = PlanTask(env="kinetome/BenchArm-v0", goal=GOAL, initial_states=(REPO / "configs/initial_states/arm_home.yaml").resolve())
    t0 = time.perf_counter()
    lp = build_problem(store, task, particles=particles, seed=seed)
    found = search_chains(lp.problem, SearchSettings(max_length=4, top=1, time_budget_s=600, seed=seed))
    t_search = time.perf_counter() - t0
    confirmed = confirm_candidates(store, list(found.candidates), task, lp.goal, ChainSettings(seed=seed))
    total = time.perf_counter() - t0
    z3 = lp.memo.asked if lp.memo is not None else 0
    return {"skills": len(lp.skills), "found": found, "confirmed": confirmed, "search_s": t_search, "total_s": total, "z3": z3}


def _enumerate(lp, seed: int) -> tuple[list, int]:
    """Every sequence up to depth 4, prefix particles shared; returns (scored goal sequences, sequences scored)."""
    from kinetome.library.planning.search import OPEN, LinkFact, _child_rng, _extend, _goal, start_particles

    problem = lp.problem
    refs = list(problem.skills)
    out = []
    count = 0

    def subtree(depth: int) -> int:
        return sum((len(refs) - 1) ** d for d in range(0, 4 - depth + 1)) if depth <= 4 else 0

    def visit(prefix: tuple, p) -> None:
        nonlocal count
        for ref in refs:
            if prefix and ref == prefix[-1]:
                continue
            seq = (*prefix, ref)
            if p.success <= 0:  # nothing left: the whole subtree scores 0 without model calls
                count += subtree(len(seq))
                continue
            count += 1
            q, _ = _extend(problem, p, ref, LinkFact(OPEN), _child_rng(seed, seq))
            g = _goal(problem, q, LinkFact(OPEN))
            if g.success > 0:
                out.append((seq, g))
            if len(seq) < 4:
                visit(seq, q)

    visit((), start_particles(problem.start))
    return out, count


def run_enumeration(store_dir: Path, particles: int, seed: int) -> dict:
    import math

    from kinetome.library.api import open_store
    from kinetome.library.planning.confirm import ChainSettings, confirm_candidates
    from kinetome.library.planning.library_problem import PlanTask, build_problem
    from kinetome.library.planning.search import OPEN, Candidate, LinkFact

    store = open_store(store_dir)
    task = PlanTask(env="kinetome/BenchArm-v0", goal=GOAL, initial_states=(REPO / "configs/initial_states/arm_home.yaml").resolve())
    t0 = time.perf_counter()
    lp = build_problem(store, task, particles=particles, seed=seed)
    scored, count = _enumerate(lp, seed)
    scored.sort(key=lambda r: (-math.floor(r[1].success / 0.01 + 1e-9), r[1].steps, len(r[0])))
    best = [Candidate(seq, p.success, p.discounted, p.steps, p.stated_error, LinkFact(OPEN), p.scored_by) for seq, p in scored[:5]]
    t_enum = time.perf_counter() - t0
    confirmed = confirm_candidates(store, best, task, lp.goal, ChainSettings(seed=seed))
    return {"count": count, "best": best, "confirmed": confirmed, "enum_s": t_enum, "total_s": time.perf_counter() - t0}


def naive_estimate(store_dir: Path, particles: int, seed: int, samples: int = 300) -> tuple[float, int]:
    """Seconds per sequence when each one is scored on its own (no shared prefixes), from ``samples``
    sequences drawn uniformly among all of depth 1 to 4; returns (seconds per sequence, sequences)."""
    from kinetome.library.api import open_store
    from kinetome.library.planning import score_sequence
    from kinetome.library.planning.library_problem import PlanTask, build_problem

    task = PlanTask(env="kinetome/BenchArm-v0", goal=GOAL, initial_states=(REPO / "configs/initial_states/arm_home.yaml").resolve())
    lp = build_problem(open_store(store_dir), task, particles=particles, seed=seed)
    refs = list(lp.problem.skills)
    n = len(refs)
    sizes = [n * (n - 1) ** (d - 1) for d in range(1, 5)]
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    for _ in range(samples):
        depth = 1 + int(rng.choice(4, p=np.array(sizes) / sum(sizes)))
        seq = [refs[int(rng.integers(n))]]
        while len(seq) < depth:
            seq.append(rng.choice([r for r in refs if r != seq[-1]]))
        score_sequence(lp.problem, tuple(seq), seed=seed)
    return (time.perf_counter() - t0) / samples, sum(sizes)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fit-episodes", type=int, default=200)
    parser.add_argument("--particles", type=int, default=100)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--library", type=Path, help="keep the built and fitted library here (reused when it exists)")
    args = parser.parse_args(argv)
    log = lambda text: print(text, file=sys.stderr, flush=True)  # noqa: E731
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp)
        t = time.perf_counter()
        if args.library and (args.library / "index.sqlite").exists():
            store_dir = root / "store"
            shutil.copytree(args.library, store_dir)
        else:
            store_dir = build_store(root, args.fit_episodes, args.seed, log)
            if args.library:
                shutil.copytree(store_dir, args.library)
        log(f"library ready in {time.perf_counter() - t:.0f} s")
        copy = root / "store-enumeration"
        shutil.copytree(store_dir, copy)
        warm = root / "store-warm-up"
        shutil.copytree(store_dir, warm)
        t = time.perf_counter()
        run_search(warm, args.particles, args.seed)  # imports every module both paths use; not timed
        log(f"warm-up plan (untimed) {time.perf_counter() - t:.1f} s")
        s = run_search(store_dir, args.particles, args.seed)
        found = s["found"]
        win = s["confirmed"][0] if s["confirmed"] else None
        log(f"search: {found.scored} scored, {found.pruned} pruned, {s['search_s']:.2f} s incl. loading, z3 questions {s['z3']}; winner {win.chain.skills if win else None} "
            f"lower {win.lower if win else float('nan'):.3f}; total {s['total_s']:.1f} s")
        e = run_enumeration(copy, args.particles, args.seed)
        ewin = next((c for c in e["confirmed"] if c.passed), None)
        log(f"enumeration: {e['count']} sequences, {e['enum_s']:.2f} s incl. loading; checks {e['total_s'] - e['enum_s']:.1f} s; best 5 {[c.skills for c in e['best']]}; "
            f"winner {ewin.chain.skills if ewin else None}; total {e['total_s']:.1f} s")
        per, total = naive_estimate(copy, args.particles, args.seed)
        log(f"naive scoring: {per * 1000:.2f} ms per sequence on its own")
    ratio = s["total_s"] / e["total_s"]
    print(f"| chain search, {s['skills']} skills, goal at depth 4: sequences scored per second | `python tests/bench/bench_plan.py` | "
          f"{found.scored / s['search_s']:.1f}/s ({found.scored} scored, {found.pruned} handoffs pruned by pair facts, {s['z3']} z3 questions, {s['search_s']:.2f} s incl. loading); "
          f"enumeration {e['count'] / e['enum_s']:.0f}/s counting zero-mass subtrees | reported |")
    print(f"| time to a confirmed chain: plan (search + check of the winner) vs model-scored exhaustive enumeration to depth 4 + checks of its best 5, same run | "
          f"`python tests/bench/bench_plan.py` | {s['total_s']:.1f} s vs {e['total_s']:.1f} s = 1/{1 / ratio:.1f} ({ratio:.3f}); "
          f"without the checks {s['search_s']:.2f} s vs {e['enum_s']:.2f} s = 1/{e['enum_s'] / s['search_s']:.1f}; one check "
          f"{s['total_s'] - s['search_s']:.1f} s, five {e['total_s'] - e['enum_s']:.1f} s; plan chose "
          f"{' -> '.join(win.chain.skills) if win else 'none'}, enumeration {' -> '.join(ewin.chain.skills) if ewin else 'none'} | <= 1/20 |")
    naive = per * total + (e["total_s"] - e["enum_s"])
    print(f"| same, against enumeration that scores each of the {total:,} sequences on its own (no shared prefixes; "
          f"extrapolated from 300 sampled sequences) + the same 5 checks | `python tests/bench/bench_plan.py` | "
          f"{s['total_s']:.1f} s vs about {naive:,.0f} s = 1/{naive / s['total_s']:.0f} | <= 1/20 |")
    return 0


if __name__ == "__main__":
    sys.exit(main())

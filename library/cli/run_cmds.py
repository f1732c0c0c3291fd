"""Runtime commands: run (execute a stored skill many times) and fit (option models)."""

from __future__ import annotations

import argparse
from typing import Any

from .output import print_json, print_table
from .progress import Progress

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser("run", parents=[common], help="run a stored skill as an option for many episodes")
    p.add_argument("ref", metavar="NAME[@N]")
    p.add_argument("--variant", metavar="FILE", help="task variant YAML (payload, friction, ...)")
    p.add_argument("--start", metavar="FILE", help="start-state distribution YAML (default: the env's)")
    p.add_argument("--episodes", type=int, default=100)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--workers", type=int, default=1, help="simulation threads")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_run)

    p = sub.add_parser("fit", parents=[common], help="fit option models (duration, reward, end state) from rollouts")
    p.add_argument("ref", metavar="NAME[@N]")
    p.add_argument("--episodes", type=int, default=400)
    p.add_argument("--variant", metavar="FILE")
    p.add_argument("--start", metavar="FILE")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--workers", type=int, default=1)
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_fit)


def _quiet(args: argparse.Namespace) -> bool:
    """--quiet, and --json (machine output stays clean), turn progress off."""
    return bool(getattr(args, "quiet", False) or getattr(args, "json", False))


def _store(args: argparse.Namespace) -> Any:
    from ..api import open_store

    return open_store(getattr(args, "store", None))


def _run(args: argparse.Namespace) -> int:
    from ..api import run

    bar = Progress(f"run {args.ref} ({args.episodes} episodes)", unit="steps", quiet=_quiet(args))
    summary = run(
        args.ref,
        store=_store(args),
        variant=args.variant,
        start=args.start,
        episodes=args.episodes,
        seed=args.seed,
        workers=args.workers,
        progress=lambda done, total: bar.update(done, total=total),
    )
    bar.close()
    if args.json:
        print_json(summary)
        return 0
    s = summary["success"]
    low, high = s["interval"]
    print(f"{summary['skill']} on {summary['env']}" + (f" with variant {summary['variant']}" if summary["variant"] else ""))
    print(f"  success   {s['count']}/{summary['episodes']} = {s['rate']:.3f}  ({s['confidence']:.0%} exact interval {low:.3f} to {high:.3f})")
    st = summary["steps"]
    print(f"  steps     mean {st['mean']:.1f}  p10 {st['p10']:.0f}  median {st['p50']:.0f}  p90 {st['p90']:.0f}  max {st['max']}")
    r = summary["return"]
    print(f"  return    mean {r['mean']:.3f}  std {r['std']:.3f}  discounted (gamma {r['gamma']}) {r['discounted_mean']:.3f}")
    reasons = summary["end_reasons"][summary["skill"]]
    print("  ended     " + ", ".join(f"{k} {v}" for k, v in reasons.items()))
    if summary["limits"]:
        print("\ndeclared limits")
        print_table(
            [{**row, "flag": "EXCEEDED" if row["episodes_over"] else "ok"} for row in summary["limits"]],
            [("limit", "LIMIT"), ("declared", "DECLARED"), ("worst", "WORST SEEN"), ("episodes_over", "EPISODES OVER"), ("flag", "")],
        )
    return 0


def _fit(args: argparse.Namespace) -> int:
    from ..api import fit

    with Progress(f"fit {args.ref} ({args.episodes} episodes)", unit="steps", quiet=_quiet(args)) as bar:
        result = fit(
            args.ref, store=_store(args), episodes=args.episodes, variant=args.variant, start=args.start, seed=args.seed,
            workers=args.workers, progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        print_json(result)
        return 0
    print(f"fitted option models for {result['skill']} from {result['episodes']} episodes -> {result['model_ref']}")
    from ..model_headlines import headlines

    print_table(headlines(result["errors"]), [("check", "HELD-OUT CHECK"), ("value", "VALUE")])
    return 0

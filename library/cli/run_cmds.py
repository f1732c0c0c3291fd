"""Runtime commands: run (execute a stored skill many times) and fit (option models)."""

from __future__ import annotations

import argparse
from typing import Any

from .execution_options import add_execution_options, execution_arguments
from .old_spellings import add_old_option
from .output import print_json, print_table
from .progress import Progress

__all__ = ["add_parsers", "add_task_options"]

JSON_HELP = "print machine-readable JSON (with a schema field) instead of text"


def add_task_options(p: argparse.ArgumentParser, *, variant_required: bool = False) -> None:
    """--variant and --initial-states (old spelling --start, hidden)."""
    p.add_argument("--variant", metavar="FILE", required=variant_required, help="task variant YAML (payload, friction, ...; e.g. configs/variants/heavy_payload.yaml)")
    p.add_argument("--initial-states", dest="initial_states", metavar="FILE", help="initial-states YAML (e.g. configs/initial_states/arm_clearance.yaml; default: the env's own)")
    add_old_option(p, "--start", "--initial-states", dest="initial_states")


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser("run", parents=[common], help="run a stored skill as an option for many episodes")
    p.add_argument("ref", metavar="NAME[@N]", help="the skill to run (a name means its current version)")
    add_task_options(p)
    p.add_argument("--episodes", type=int, default=100, help="episodes to run (default 100)")
    p.add_argument("--seed", type=int, default=0, help="seed of the initial states and exploration (default 0)")
    add_execution_options(p)
    p.add_argument("--chooser", action="store_true",
                   help="run the skills trained together with NAME@N (kinetome train) under their trained policy over skills")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_run)

    p = sub.add_parser("fit", parents=[common], help="fit option models (duration, reward, end state) from rollouts")
    p.add_argument("ref", metavar="NAME[@N]", help="the version to fit models for (a name means its current version)")
    p.add_argument("--episodes", type=int, default=400, help="episodes to collect, a quarter held out (default 400, at least 20)")
    add_task_options(p)
    p.add_argument("--seed", type=int, default=0, help="seed of the initial states and the held-out split (default 0)")
    add_execution_options(p)
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_fit)


def _quiet(args: argparse.Namespace) -> bool:
    """--quiet, and --json (machine output stays clean), turn progress off."""
    return bool(getattr(args, "quiet", False) or getattr(args, "json", False))


def _store(args: argparse.Namespace) -> Any:
    from ..api import open_store

    return open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None))


def _run(args: argparse.Namespace) -> int:
    from ..api import run

    if args.chooser:
        return _run_chooser(args)
    bar = Progress(f"run {args.ref} ({args.episodes} episodes)", unit="steps", quiet=_quiet(args))
    summary = run(
        args.ref,
        store=_store(args),
        variant=args.variant,
        initial_states=args.initial_states,
        episodes=args.episodes,
        seed=args.seed,
        **execution_arguments(args),
        progress=lambda done, total: bar.update(done, total=total),
    )
    bar.close()
    if args.json:
        print_json(summary)
        return 0
    print(format_run(summary))
    return 0


def _run_chooser(args: argparse.Namespace) -> int:
    from ..api import run_chooser

    with Progress(f"run {args.ref} under its chooser ({args.episodes} episodes)", unit="steps", quiet=_quiet(args)) as bar:
        summary = run_chooser(
            args.ref, store=_store(args), variant=args.variant, initial_states=args.initial_states, episodes=args.episodes,
            seed=args.seed, **execution_arguments(args), progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        print_json(summary)
        return 0
    print(f"{summary['chooser']}: {', '.join(summary['skills'])} on {summary['env']}" + (f" with variant {summary['variant']}" if summary["variant"] else ""))
    r, d = summary["return"], summary["duration"]
    print(f"  return    mean {r['mean']:.3f}  std {r['std']:.3f}  discounted (gamma {r['gamma']}) {r['discounted_mean']:.3f}")
    print(f"  duration  mean {d['mean']:.1f} steps  max {d['max']}")
    print(f"  turns     {summary['turns_per_episode']:.2f} per episode, mean {summary['turn_duration_mean']:.1f} steps")
    print("  outcomes  " + ", ".join(f"{k} {v}" for k, v in summary["outcomes"].items() if v))
    print_table([{"skill": ref, "share": share, "stop": summary["stops"][ref]} for ref, share in summary["skill_share"].items()],
                [("skill", "SKILL"), ("share", "SHARE OF STEPS"), ("stop", "STOPS BY")])
    print(summary["caution"])
    return 0


def format_run(summary: dict[str, Any]) -> str:
    """The text ``kinetome run`` prints for a ``run`` summary."""
    from ..safety import LIMITS_NOTE

    low, high = summary["success_interval"]
    n = summary["episodes"]
    lines = [
        f"{summary['skill']} on {summary['env']}" + (f" with variant {summary['variant']}" if summary["variant"] else ""),
        f"  success   {summary['successes']}/{n} = {summary['success_rate']:.3f}  ({summary['confidence']:.0%} exact interval {low:.3f} to {high:.3f})",
    ]
    d = summary["duration"]
    lines.append(f"  duration  mean {d['mean']:.1f}  p10 {d['p10']:.0f}  median {d['p50']:.0f}  p90 {d['p90']:.0f}  max {d['max']} steps")
    r = summary["return"]
    lines.append(f"  return    mean {r['mean']:.3f}  std {r['std']:.3f}  discounted (gamma {r['gamma']}) {r['discounted_mean']:.3f}")
    lines.append("  outcomes  " + ", ".join(f"{k} {v}" for k, v in summary["outcomes"][summary["skill"]].items()))
    if summary["limits"]:
        from .output import format_table

        rows = [{**row, "seen": f"exceeded in {row['episodes_over']} of {row['episodes']}" if row["episodes_over"] else f"not exceeded in {row['episodes']} simulated episodes"} for row in summary["limits"]]
        lines += ["", "declared limits (not enforced by kinetome; not a safety function)"]
        lines.append(format_table(rows, [("limit", "LIMIT"), ("declared", "DECLARED"), ("worst", "WORST SEEN"), ("seen", "IN SIMULATION")]))
        lines.append(LIMITS_NOTE)
    lines.append(summary["caution"])
    return "\n".join(lines)


def _fit(args: argparse.Namespace) -> int:
    from ..api import fit

    with Progress(f"fit {args.ref} ({args.episodes} episodes)", unit="steps", quiet=_quiet(args)) as bar:
        result = fit(
            args.ref, store=_store(args), episodes=args.episodes, variant=args.variant, initial_states=args.initial_states, seed=args.seed,
            **execution_arguments(args), progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        print_json(result)
        return 0
    print(f"fitted option models for {result['skill']} from {result['episodes']} episodes -> {result['model_ref']}")
    from ..model_headlines import headlines

    print_table(headlines(result["errors"]), [("check", "HELD-OUT CHECK"), ("value", "VALUE")])
    print(result["caution"])
    return 0

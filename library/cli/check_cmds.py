"""`kinetome check`: prove or measure that a planned chain of skills composes."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any

from .execution_options import add_execution_options, execution_arguments

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser(
        "check",
        parents=[common],
        help="check handoff by handoff that a chain of skills composes (exit 0 composes, 1 breaks, 2 bad input, 3 unsure)",
        description=(
            "A handoff composes when the skill before it stops in time and the next one accepts that state. "
            "Exit 0 only when every handoff composes and the whole chain meets require.chain. "
            "Simulation results do not make a chain safe on a real machine."
        ),
    )
    p.add_argument("chain", metavar="CHAIN.yaml", help="the chain file (name, task, skills, require, ...)")
    p.add_argument(
        "--method", choices=["auto", "static", "model", "sim"], default="auto",
        help="auto (default): prove containment, then simulate as few episodes as decide; static: the solver only "
        "(never shows liveness); model: option models only; sim: a fixed number of simulated episodes",
    )
    p.add_argument("--episodes", type=int, help="simulation budget in episodes (default: the chain file's, else 200)")
    p.add_argument("--seed", type=int, help="seed of the initial states and every random draw (default: the chain file's, else 0)")
    add_execution_options(p)
    p.add_argument("--json", action="store_true", help="print the result as JSON (schema kinetome.check/1)")
    p.add_argument("--out", metavar="DIR", help="write the text, JSON and PNG plots to DIR")
    p.add_argument("--fail-on-gaps", action="store_true",
                   help="a contract gap (a state A may stop in that B refuses, even if never reached) breaks its handoff")
    p.add_argument("--fail-on-limits", action="store_true",
                   help="a declared limit exceeded in simulation, or a command jump above handoff_limits.command_jump, breaks its handoff")
    p.add_argument("--fresh", action="store_true",
                   help="run the check even when the store holds the result of the same check (same skill identities, "
                   "task, settings and software); the new result is stored too")
    p.set_defaults(handler=_check)


def _check(args: argparse.Namespace) -> int:
    from ..api import check_chain, open_store
    from .progress import Progress

    quiet = bool(getattr(args, "quiet", False) or args.json)
    with Progress(f"simulating {Path(args.chain).name}", unit="episodes", quiet=quiet) as bar:
        result = check_chain(
            args.chain,
            store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)),
            method=args.method,
            episodes=args.episodes,
            seed=args.seed,
            **execution_arguments(args),
            out=args.out,
            fail_on_gaps=args.fail_on_gaps,
            fail_on_limits=args.fail_on_limits,
            reuse=not args.fresh,
            progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        sys.stdout.write(result.to_json() + "\n")
    else:
        print(result.format_text())
        if args.out:
            print(f"\nreport written to {args.out}")
    return result.exit_code

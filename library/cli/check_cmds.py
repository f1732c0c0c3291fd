"""`kinetome check`: prove or measure that a planned chain of skills composes."""

from __future__ import annotations

import argparse
from pathlib import Path
import sys
from typing import Any

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser(
        "check",
        parents=[common],
        help="check handoff by handoff that a chain of skills composes (exit 0 composes, 1 breaks, 2 bad input, 3 unsure)",
    )
    p.add_argument("chain", metavar="CHAIN.yaml")
    p.add_argument("--method", choices=["auto", "static", "model", "sim"], default="auto")
    p.add_argument("--episodes", type=int, help="simulation episodes (default: the chain file's, else 200)")
    p.add_argument("--seed", type=int)
    p.add_argument("--workers", type=int, default=1)
    p.add_argument("--json", action="store_true")
    p.add_argument("--report", metavar="DIR", help="write the text, JSON and PNG plots to DIR")
    p.set_defaults(handler=_check)


def _check(args: argparse.Namespace) -> int:
    from ..api import check_chain, open_store
    from .progress import Progress

    quiet = bool(getattr(args, "quiet", False) or args.json)
    with Progress(f"simulating {Path(args.chain).name}", unit="steps", quiet=quiet) as bar:
        result = check_chain(
            args.chain,
            store=open_store(getattr(args, "store", None)),
            method=args.method,
            episodes=args.episodes,
            seed=args.seed,
            workers=args.workers,
            out=args.report,
            progress=lambda done, total: bar.update(done, total=total),
        )
    if args.json:
        sys.stdout.write(result.to_json() + "\n")
    else:
        print(result.format_text())
        if args.report:
            print(f"\nreport written to {args.report}")
    return result.exit_code

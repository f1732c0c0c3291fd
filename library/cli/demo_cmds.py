"""`kinetome demo`: the whole job on the demo scenario, with a report."""

from __future__ import annotations

import argparse
from typing import Any

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    from ..safety import CAUTION

    p = sub.add_parser(
        "demo",
        parents=[common],
        help="register, fit, check, retrain and report on the demo scenario",
        description="Run the whole job on the invented workshop scenario and write DIR/report.html. " + CAUTION,
    )
    p.add_argument("--out", default="kinetome-demo", metavar="DIR", help="output folder (default ./kinetome-demo)")
    p.add_argument("--quick", action="store_true", help="small budgets (about a minute and a half on 2 cores)")
    p.set_defaults(handler=_demo)


def _demo(args: argparse.Namespace) -> int:
    from ..demo import run_demo

    run_demo(args.out, store_dir=getattr(args, "store", None), quick=args.quick, quiet=getattr(args, "quiet", False))
    return 0

"""`kinetome sweep`: map where a skill or chain works over task variants and disturbances."""

from __future__ import annotations

import argparse
from typing import Any

from .output import print_json
from .run_cmds import JSON_HELP

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    from ..safety import CAUTION
    from ..sweep.axes import AXES

    p = sub.add_parser(
        "sweep",
        parents=[common],
        help="robustness sweep: success per cell over task variants and disturbances; records the valid-for region",
        description=(
            "Run a skill or chain on every cell of a grid (or a random sample) of task variants and disturbances: per cell "
            "the exact success interval and episodes run, marked pass / fail / unsure against the requirement with a "
            "correction across cells. The passing cells are the valid-for region, stored on the version with its evidence "
            f"(the same sweep on the same versions is read back, not re-run). Axes: {', '.join(AXES)}. " + CAUTION
        ),
    )
    p.add_argument("target", metavar="TARGET", help="a sweep file (YAML with axes:), a chain file, or a skill (NAME, NAME@N or a spec file)")
    p.add_argument("--axis", action="append", default=[], metavar="NAME=V1,V2,...",
                   help="an axis and its grid values (NAME=LOW:HIGH with --samples); repeat for more axes; replaces the file's axis of that name")
    p.add_argument("--samples", type=int, metavar="N", help="random cells instead of a grid: N points drawn over the axes' LOW:HIGH ranges")
    p.add_argument("--variant", metavar="FILE", help="base task variant of a skill sweep (the axes change it per cell)")
    p.add_argument("--initial-states", dest="initial_states", metavar="FILE", help="initial states of a skill sweep (default: the skill's own, else the env's)")
    p.add_argument("--episodes", type=int, help="episodes per cell (default: the file's, else 200)")
    p.add_argument("--seed", type=int, help="sweep seed; each cell's episodes draw from (seed, cell index) only (default 0)")
    p.add_argument("--require", type=float, metavar="P", help="success a cell must show (default: the file's, a chain's require.chain, else 0.95)")
    p.add_argument("--confidence", type=float, help="confidence of the bounds (default 0.95)")
    p.add_argument("--correction", choices=("holm", "bonferroni"), help="correction across cells (default holm: Holm-Bonferroni)")
    p.add_argument("--workers", type=int, help="cells run on N local Ray worker processes (default: this process); same result at any count")
    p.add_argument("--address", metavar="HOST:PORT", help="run the cells on the Ray cluster at this address (workers receive the skills' files, never the store)")
    p.add_argument("--no-reuse", dest="reuse", action="store_false", help="simulate even when the same sweep is stored (the new result is stored too)")
    p.add_argument("--out", metavar="DIR", help="write sweep.json, sweep.txt and heatmap.png to DIR")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_sweep)


def _sweep(args: argparse.Namespace) -> int:
    from ..api import open_store, sweep
    from ..sweep.text import format_sweep

    result = sweep(
        args.target, store=open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None)), axes=args.axis,
        samples=args.samples, variant=args.variant, initial_states=args.initial_states, episodes=args.episodes, seed=args.seed,
        require=args.require, confidence=args.confidence, correction=args.correction, out=args.out, reuse=args.reuse,
        workers=args.workers, address=args.address,
    )
    if args.json:
        print_json(result)
    else:
        print(format_sweep(result))
    return 0

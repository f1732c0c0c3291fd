"""Versions and evidence: ``promote`` makes a version current for a task (rolling back is
promoting an older version)."""

from __future__ import annotations

import argparse
from typing import Any

from ..output_schema import tagged
from .output import print_json
from .store_cmds import JSON_HELP

__all__ = ["add_parsers"]


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser(
        "promote",
        parents=[common],
        help="make a version current for a task; roll back by promoting an older version",
        description=(
            "Make NAME@N the version that unpinned references to NAME resolve to on TASK "
            "(chains resolve through their variant; other commands use nominal). "
            "Rolling back is promoting an older version. `kinetome lineage NAME` shows what is current and why."
        ),
    )
    p.add_argument("ref", metavar="NAME@N", help="the version, pinned by number or identity (NAME@id:HEX)")
    p.add_argument("--task", default="nominal", metavar="TASK", help="task variant name, e.g. heavy_payload (default: nominal)")
    p.add_argument("--note", metavar="TEXT", help="why; kept with the change and shown by lineage")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_promote)


def _promote(args: argparse.Namespace) -> int:
    from ..api import open_store
    from ..store import parse_pin

    store = open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None), create=False)
    before = store.currents(parse_pin(args.ref).name).get(args.task)
    entry = store.promote(args.ref, task=args.task, evidence={"note": args.note} if args.note else None)
    if args.json:
        print_json(tagged("promote", {"name": entry.name, "task": entry.task, "version": entry.version, "previous": before.version if before else None, "created_at": entry.created_at}))
    else:
        was = f" (was {before.version})" if before else ""
        print(f"{entry.version} is now current for {entry.task}{was}")
    return 0

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
    p.add_argument("--task", default="nominal", metavar="TASK", help="a task the skill already has (e.g. heavy_payload; default: nominal), or a variant file "
                   "for a new task (its variant's name)")
    p.add_argument("--note", metavar="TEXT", help="why; kept with the change and shown by lineage")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_promote)


def known_tasks(store: Any, name: str) -> set[str]:
    """Tasks the store knows for skill ``name``: nominal, every task a version was or is current for, and
    the variant every version was made for."""
    tasks = {"nominal", *store.currents(name)}
    tasks |= {entry.task for entry in store.current_history(name)}
    for version in store.history(name):
        variant = (version.meta or {}).get("variant") or {}
        if isinstance(variant, dict) and variant.get("name"):
            tasks.add(variant["name"])
    return tasks


def _checked_task(store: Any, name: str, task: str) -> str:
    """``--task`` as a known task name, or a variant file (its variant's name: a new task); else refused,
    so a misspelt name does not silently create a task nothing resolves through."""
    from pathlib import Path

    from ..errors import InvalidInputError
    from ..tasks import load_variant_file

    if task.endswith((".yaml", ".yml")) and Path(task).is_file():
        return load_variant_file(task).name
    known = known_tasks(store, name)
    if task in known:
        return task
    raise InvalidInputError(f"--task {task!r}: {name} has no current version, no version made for and no evidence on a task of "
                            f"that name; known tasks: {', '.join(sorted(known))}. Check the spelling, or for a new task give "
                            "its variant file (--task configs/variants/NAME.yaml): the task is the variant's name")


def _promote(args: argparse.Namespace) -> int:
    from ..api import open_store
    from ..store import parse_pin

    store = open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None), create=False)
    args.task = _checked_task(store, parse_pin(args.ref).name, args.task)
    before = store.currents(parse_pin(args.ref).name).get(args.task)
    entry = store.promote(args.ref, task=args.task, evidence={"note": args.note} if args.note else None)
    if args.json:
        print_json(tagged("promote", {"name": entry.name, "task": entry.task, "version": entry.version, "previous": before.version if before else None, "created_at": entry.created_at}))
    else:
        was = f" (was {before.version})" if before else ""
        print(f"{entry.version} is now current for {entry.task}{was}")
    return 0

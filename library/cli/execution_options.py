"""The options that say where episodes run: --workers, --address, --threads (run, fit, check)."""

from __future__ import annotations

import argparse

__all__ = ["add_execution_options", "execution_arguments"]


def add_execution_options(p: argparse.ArgumentParser) -> None:
    """Where blocks of episodes run; none of these changes a result."""
    p.add_argument("--workers", type=int, metavar="N",
                   help="run blocks of episodes on N Ray worker processes, one thread each (default: this process; "
                        "needs pip install -e '.[cluster]', else runs here and says so); results are identical")
    p.add_argument("--address", metavar="ADDR",
                   help="run the blocks on the running Ray cluster at ADDR (host:port of `ray start --head`, or auto), "
                        "on N of its CPUs with --workers N, else all; results are identical")
    p.add_argument("--threads", type=int, default=1, metavar="N",
                   help="MuJoCo threads in this process (default 1; not with --workers/--address); results are identical")


def execution_arguments(args: argparse.Namespace) -> dict:
    """workers/address/threads keywords for the API."""
    return {"workers": args.workers, "address": args.address, "threads": args.threads}

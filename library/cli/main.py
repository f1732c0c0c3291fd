"""kinetome command entry point: parse arguments, dispatch, map errors to exit codes.

Command modules register their parsers here; each imports heavy libraries
(torch, mujoco, z3) only inside its handler so that ``list``, ``show`` and
``lineage`` stay fast.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from importlib import import_module

from ..errors import KinetomeError
from ..renamed_keys import RenamedKeyWarning
from .output import print_error

__all__ = ["main", "build_parser", "common_options"]


STORE_HELP = (
    "skill store: a folder, or a postgresql:// URL for a shared store (no password in it: use ~/.pgpass "
    "or a service file) (default: $KINETOME_STORE, else the user data dir)"
)
BLOBS_HELP = (
    "where the store keeps its files: a folder (shared by every machine) or s3://bucket/prefix; "
    "needed when creating a store on a database server (default: $KINETOME_BLOBS, else what the store recorded)"
)


def common_options() -> argparse.ArgumentParser:
    """--store, --blobs, --debug and --quiet, accepted after the command name too."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--store", metavar="STORE", default=argparse.SUPPRESS, help=STORE_HELP)
    common.add_argument("--blobs", metavar="BLOBS", default=argparse.SUPPRESS, help=BLOBS_HELP)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS, help="show tracebacks on errors")
    common.add_argument(
        "--quiet", action="store_true", default=argparse.SUPPRESS,
        help="no progress bar or progress lines on long commands (retrain, train, run, fit, check, demo)",
    )
    return common

# command modules, in the order ``--help`` lists them
_COMMAND_MODULES = ("store_cmds", "version_cmds", "run_cmds", "check_cmds", "plan_cmds", "sweep_cmds", "train_cmds", "initiation_cmds", "demo_cmds")

_DESCRIPTION = (
    "kinetome keeps a versioned library of robot skills (controllers packaged as options), "
    "retrains them on changed tasks and checks that planned chains of skills compose."
)


def _version() -> str:
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("kinetome")
    except PackageNotFoundError:  # running from a source tree that was never installed
        return "unknown (not installed)"


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(prog="kinetome", description=_DESCRIPTION)
    parser.add_argument("--version", action="version", version=f"kinetome {_version()}", help="print the installed version and exit")
    parser.add_argument("--store", metavar="STORE", help=STORE_HELP)
    parser.add_argument("--blobs", metavar="BLOBS", help=BLOBS_HELP)
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    parser.add_argument("--quiet", action="store_true", help="no progress bar or progress lines on long commands")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", help="one of the commands below; kinetome COMMAND --help lists its options")
    sub.required = True
    for module_name in _COMMAND_MODULES:
        try:
            module = import_module(f"{__package__}.{module_name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"{__package__}.{module_name}":
                continue
            raise
        module.add_parsers(sub, common_options())
    return parser


def _show_warning(show: object) -> object:
    """Old spellings print as ``kinetome: warning: ...``; other warnings as Python prints them."""

    def showwarning(message, category, filename, lineno, file=None, line=None):  # noqa: ANN001
        if issubclass(category, RenamedKeyWarning):
            print_error(f"warning: {message}")
        else:
            show(message, category, filename, lineno, file, line)

    return showwarning


def main(argv: list[str] | None = None) -> int:
    with warnings.catch_warnings():
        warnings.simplefilter("default", RenamedKeyWarning)
        warnings.showwarning = _show_warning(warnings.showwarning)
        return _main(argv)


def _main(argv: list[str] | None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.handler(args) or 0)
    except KinetomeError as exc:
        if args.debug:
            raise
        for line in exc.lines():
            print_error(line)
        return exc.exit_code
    except KeyboardInterrupt:
        print_error("interrupted")
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":
    sys.exit(main())

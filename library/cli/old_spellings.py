"""Command-line spellings that were renamed: hidden aliases that still work and warn once."""

from __future__ import annotations

import argparse
import warnings
from typing import Any, Callable

from ..renamed_keys import RenamedKeyWarning

__all__ = ["add_old_option", "warn_old_command"]


class _OldOption(argparse.Action):
    """Store like the new option, after a warning naming the new spelling."""

    def __init__(self, option_strings: list[str], dest: str, *, new: str, **kwargs: Any):
        self.new = new
        super().__init__(option_strings, dest, **kwargs)

    def __call__(self, parser: argparse.ArgumentParser, namespace: argparse.Namespace, values: Any, option_string: str | None = None) -> None:
        warnings.warn(RenamedKeyWarning(f"'{option_string}' is an old spelling; write '{self.new}' instead"), stacklevel=2)
        setattr(namespace, self.dest, True if self.nargs == 0 else values)


def add_old_option(parser: argparse.ArgumentParser, old: str, new: str, *, dest: str, type: Callable[[str], Any] | None = None, flag: bool = False) -> None:
    """Accept ``old`` as a hidden alias of ``new`` (same ``dest``); it does not appear in ``--help``."""
    if flag:
        parser.add_argument(old, dest=dest, action=_OldOption, new=new, nargs=0, default=argparse.SUPPRESS, help=argparse.SUPPRESS)
    else:
        parser.add_argument(old, dest=dest, action=_OldOption, new=new, type=type, default=argparse.SUPPRESS, help=argparse.SUPPRESS)


def warn_old_command(old: str, new: str) -> None:
    """Say once that command ``old`` is now ``new``."""
    warnings.warn(RenamedKeyWarning(f"'kinetome {old}' is an old spelling; write 'kinetome {new}' instead"), stacklevel=2)

"""Bridge to kinetome.envs: build rigs, read variant and start files, with our errors.

envs raises its own ``EnvConfigError`` (it imports nothing of ours); here it
becomes an ``InvalidInputError`` so the CLI exits 2 with one line per problem.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .errors import InvalidInputError, Problem

__all__ = ["load_variant_file", "load_start_file", "task_rig"]


def _env_errors(fn, *args, **kwargs):
    from kinetome.envs import EnvConfigError

    try:
        return fn(*args, **kwargs)
    except EnvConfigError as exc:
        # envs already formats each line as "FILE:LINE: field: what; fix"
        raise InvalidInputError(list(exc.problems)) from None


def load_variant_file(path: str | Path | None) -> Any:
    """A TaskVariant from YAML, or None."""
    if path is None:
        return None
    from kinetome.envs.variants import load_variant

    return _env_errors(load_variant, path)


def load_start_file(path: str | Path | None) -> Any:
    """A StartDistribution from YAML, or None (the rig's default start)."""
    if path is None:
        return None
    from kinetome.envs.starts import load_start

    return _env_errors(load_start, path)


def task_rig(env_id: str, variant: Any = None) -> Any:
    """``make_rig`` with unknown envs and invalid variants as InvalidInputError."""
    from kinetome.envs import make_rig

    try:
        return _env_errors(make_rig, env_id, variant=variant)
    except KeyError as exc:
        raise InvalidInputError([Problem("<env>", None, "env", str(exc.args[0]))]) from None

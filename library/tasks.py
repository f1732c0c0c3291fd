"""Bridge to kinetome.envs: build rigs, read variant and start files, with our errors.

envs raises its own ``EnvConfigError`` (it imports nothing of ours); here it
becomes an ``InvalidInputError`` so the CLI exits 2 with one line per problem.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path
from typing import Any

from .errors import InvalidInputError, Problem

__all__ = ["load_variant_file", "load_start_file", "task_rig", "default_rig"]


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


@lru_cache(maxsize=32)
def default_rig(env_id: str) -> Any:
    """The nominal rig of ``env_id``, built once per process.

    Validation and skill loading only read a rig's layout, limits and model
    (simulations copy the model), so one shared instance per env is safe and
    saves compiling the MJCF again for every spec.
    """
    from kinetome.envs import make_rig

    return make_rig(env_id)

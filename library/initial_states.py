"""A skill's usual initial states: named in its spec, stored inside its version.

The spec field ``initial_states:`` is a start-distribution file (relative to the spec)
or the same mapping written inline. Registering reads it, checks it by drawing one
state on the spec's env, and stores the mapping itself in the version, so the version
does not depend on the file afterwards. ``run``, ``fit`` and ``retrain`` use it when
no ``--initial-states`` is given.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

__all__ = ["read_initial_states", "check_on_env", "skill_initial_states", "initial_states_for"]

_FIX = "name a start-distribution file (see configs/starts/) or write its mapping inline"


def read_initial_states(value: Any, *, base: Path) -> tuple[dict[str, Any] | None, list[tuple[str, str]]]:
    """(mapping, []) for a file path (relative to ``base``) or an inline mapping, else (None, [(message, fix)])."""
    from kinetome.envs.errors import EnvConfigError
    from kinetome.envs.starts import start_from_mapping
    from kinetome.envs.variants import read_yaml_with_lines

    if isinstance(value, str):
        path = Path(value) if Path(value).is_absolute() else base / value
        data, problems = read_yaml_with_lines(path)
        if data is None or problems:
            return None, [(f"cannot use {value}: {p}", _FIX) for p in problems]
        source = str(path)
    else:
        data, source = value, "initial_states"
    if not isinstance(data, dict):
        return None, [(f"must be a start distribution mapping, got {type(data).__name__}", _FIX)]
    mapping = json.loads(json.dumps(data))  # plain data: what the version stores
    try:
        start_from_mapping(mapping, source=source)
    except EnvConfigError as exc:
        inline = source == "initial_states"  # an inline mapping has no lines of its own: drop "initial_states:1:"
        return None, [(str(p).split(": ", 1)[1] if inline and ": " in str(p) else str(p), "") for p in exc.problems]
    return mapping, []


def check_on_env(mapping: dict[str, Any], env_id: Any, *, source: str) -> list[tuple[str, str]]:
    """Problems drawing one state from ``mapping`` on ``env_id`` (an unknown env is left to the env check)."""
    from kinetome.envs.errors import EnvConfigError
    from kinetome.envs.starts import start_from_mapping

    from .errors import KinetomeError
    from .runtime.starts import sample_starts
    from .tasks import default_rig

    try:
        rig = default_rig(env_id)
    except (KeyError, TypeError, KinetomeError):
        return []
    try:
        sample_starts(rig, start_from_mapping(mapping, source=source), 1, seed=0)
    except (EnvConfigError, KinetomeError, ValueError) as exc:
        lines = getattr(exc, "problems", None) or [str(exc)]
        return [(f"cannot draw a state on {env_id}: {line}", "fix the start distribution for this env") for line in lines]
    return []


def skill_initial_states(skill: Any) -> Any:
    """The StartDistribution stored with ``skill`` (a Skill), or None."""
    mapping = skill.initial_states_mapping()
    if mapping is None:
        return None
    from kinetome.envs.starts import start_from_mapping

    return start_from_mapping(mapping, source=f"{skill.name}: initial_states")


def initial_states_for(skill: Any, given: str | Path | None) -> Any:
    """The initial states to use: the file given on the command line, else the skill's own, else None (the env's)."""
    if given is not None:
        from .tasks import load_start_file

        return load_start_file(given)
    return skill_initial_states(skill)

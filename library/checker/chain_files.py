"""The files a chain file points at (task variant, initial states) and the chain file's old spellings."""

from __future__ import annotations

import difflib
from pathlib import Path
from typing import Any, Mapping

from ..errors import Problem
from ..yaml_source import YamlDocument

__all__ = ["check_task_files", "close_files", "old_spelling_table"]


def old_spelling_table() -> tuple[Any, ...]:
    """Wave-1 chain keys and where their values live now (read with one warning each)."""
    from ..renamed_keys import Renamed

    return (
        Renamed("chain", "name"),
        Renamed("env", "task.env"),
        Renamed("variant", "task.variant"),
        Renamed("start", "task.initial_states"),
        Renamed("steps", "skills"),
        Renamed(
            "require", "require", convert=lambda p: {"handoff": p}, when=lambda v: isinstance(v, (int, float)) and not isinstance(v, bool),
            hint="it meant each handoff's requirement: write require: {handoff: P}",
        ),
    )


def _relative(base: Path, value: str) -> Path:
    p = Path(value).expanduser()
    return p if p.is_absolute() else (base / p).resolve()


def close_files(path: Path, kind: str) -> str:
    """A fix for a missing file: the closest name in its folder, or what the folder holds."""
    folder = path.parent
    if folder.is_dir():
        names = sorted(p.name for p in folder.glob("*.y*ml"))
        close = difflib.get_close_matches(path.name, names, n=1)
        if close:
            return f"did you mean {close[0]!r}? files there: {', '.join(names)}"
        if names:
            return f"files in {folder}: {', '.join(names)}"
    return f"give a path relative to the chain file, e.g. ../{kind}/<name>.yaml"


def _env_problems(doc: YamlDocument, where: tuple, what: str, path: Path, exc: Exception) -> list[Problem]:
    lines = exc.problems if hasattr(exc, "problems") else [str(exc)]
    label = ".".join(where)
    return [doc.problem(where, f"{what} {path} is invalid: {item}", f"fix {path.name} or point {label} at another file") for item in lines]


def _existing(doc: YamlDocument, base: Path, raw: str, where: tuple, what: str, folder: str) -> tuple[Path, list[Problem]]:
    """The file a chain field names, resolved against the chain's folder, or why it cannot be read."""
    path = _relative(base, raw)
    if path.is_file():
        return path, []
    looked = "" if Path(raw).is_absolute() else f" (looked at {path})"
    return path, [doc.problem(where, f"{what} {raw!r} cannot be read: file not found{looked}", close_files(path, folder))]


def _variant(doc: YamlDocument, base: Path, raw: Any) -> tuple[Path | None, list[Problem]]:
    from kinetome.envs import EnvConfigError
    from kinetome.envs.variants import load_variant

    where = ("task", "variant")
    if raw is None:
        return None, []
    if not isinstance(raw, str) or not raw.strip():
        return None, [doc.problem(where, f"must be a path to a variant file, got {raw!r}", "write e.g. ../variants/heavy_payload.yaml")]
    variant, problems = _existing(doc, base, raw, where, "variant file", "variants")
    if problems:
        return variant, problems
    try:
        load_variant(variant)
    except (EnvConfigError, OSError, ValueError) as exc:
        return variant, _env_problems(doc, where, "variant file", variant, exc)
    return variant, []


def _initial_states(doc: YamlDocument, base: Path, raw: Any) -> tuple[Any, list[Problem]]:
    from kinetome.envs import EnvConfigError
    from kinetome.envs.starts import load_start, start_from_mapping

    where = ("task", "initial_states")
    if raw is None:
        return None, []
    if isinstance(raw, Mapping):
        try:
            start_from_mapping(raw, source=f"{doc.source}:task.initial_states")
        except (EnvConfigError, ValueError) as exc:
            return None, _env_problems(doc, where, "inline initial states", Path(doc.source), exc)
        return dict(raw), []
    if not isinstance(raw, str) or not raw.strip():
        return None, [doc.problem(where, f"must be a path to an initial-states file or a mapping, got {raw!r}", "write e.g. ../initial_states/arm_home.yaml")]
    path, problems = _existing(doc, base, raw, where, "initial states", "initial_states")
    if problems:
        return path, problems
    try:
        load_start(path)
    except (EnvConfigError, OSError, ValueError, UnicodeDecodeError) as exc:
        return path, _env_problems(doc, where, "initial states", path, exc)
    return path, []


def check_task_files(doc: YamlDocument, base: Path, task: Mapping[str, Any]) -> tuple[Path | None, Any, list[Problem]]:
    """Resolve and load the variant and initial-states files so that bad ones fail here, with the chain's line."""
    variant, p1 = _variant(doc, base, task.get("variant"))
    initial, p2 = _initial_states(doc, base, task.get("initial_states"))
    return variant, initial, p1 + p2


"""Check the inputs of a plan before any work: every bad value is reported at once (exit 2), naming its option."""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any

from ..errors import InvalidInputError, Problem

__all__ = ["check_plan_inputs"]

_NAME = re.compile(r"[a-z0-9][a-z0-9_-]{0,63}")


def _whole(value: Any, low: int) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= low


def _probability(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value) and 0.0 < value < 1.0


def _file(option: str, path: Any, folder: str) -> list[Problem]:
    if path is None or Path(path).is_file():
        return []
    return [Problem(option, None, option, f"file {path} not found", f"give an existing file, e.g. configs/{folder}/<name>.yaml")]


def check_plan_inputs(*, max_length: Any, time_budget: Any, top: Any, particles: Any, episodes: Any, require: Any,
                      confidence: Any, seed: Any, name: Any, begin_with: Any, variant: Any, initial_states: Any) -> None:
    """Raise InvalidInputError listing every bad option (what, the value, the fix)."""
    out: list[Problem] = []

    def bad(option: str, rule: str, value: Any, fix: str) -> None:
        out.append(Problem(option, None, option, f"must be {rule}, got {value!r}", fix))

    if not _whole(max_length, 1):
        bad("--max-length", "a whole number >= 1", max_length, "e.g. --max-length 4")
    if not (isinstance(time_budget, (int, float)) and not isinstance(time_budget, bool) and math.isfinite(time_budget) and time_budget > 0):
        bad("--time-budget", "a number of seconds > 0", time_budget, "e.g. --time-budget 120")
    if not _whole(top, 1):
        bad("--top", "a whole number >= 1", top, "e.g. --top 3")
    if not _whole(particles, 10):
        bad("--particles", "a whole number >= 10", particles, "e.g. --particles 200")
    if not _whole(episodes, 1):
        bad("--episodes", "a whole number >= 1", episodes, "e.g. --episodes 200")
    if not _whole(seed, 0):
        bad("--seed", "a whole number >= 0", seed, "e.g. --seed 0")
    for option, value in (("--require", require), ("--confidence", confidence)):
        if not _probability(value):
            bad(option, "a number strictly between 0 and 1", value, f"e.g. {option} 0.95")
    if not isinstance(name, str) or not _NAME.fullmatch(name):
        bad("--name", "lowercase letters, digits, '-' or '_'", name, "e.g. --name pick-to-tray")
    if _whole(max_length, 1) and len(begin_with) > max_length:
        bad("--begin-with", f"at most --max-length ({max_length}) skills", list(begin_with), "raise --max-length or list fewer skills")
    out += _file("--variant", variant, "variants") + _file("--initial-states", initial_states, "initial_states")
    if out:
        raise InvalidInputError(out)

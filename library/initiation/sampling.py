"""Label start states by running a skill from them: did it end by its own stop condition?

The skill runs from every start state whatever its ``starts_when`` says (that is what is
being learned), for up to ``max_steps``; outcome ``stopped`` is a success. Start states come
from the initial states given, else the skill's usual ones, else the env's default, optionally
*widened*: uniform noise of a stated half-width added to named quantities that are coordinates
of the state (``qpos``, ``qvel``, or quantities read straight from them, e.g. ``torso_height``;
one component with ``qvel[1]``), then limited joints clipped into range.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import InvalidInputError

__all__ = ["Widening", "parse_widening", "DEFAULT_WIDENING", "widen_states", "Samples", "sample_outcomes"]

DEFAULT_WIDENING = ("qpos=0.2", "qvel=0.5")  # rad or m, rad/s or m/s: half-widths of the added uniform noise
_ITEM = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)(?:\[(\d+)\])?\s*=\s*([^\s]+)\s*$")


@dataclass(frozen=True)
class Widening:
    """Half-widths of uniform noise added to named state coordinates: ((quantity, component or None, width), ...)."""

    items: tuple[tuple[str, int | None, float], ...] = ()

    def describe(self) -> str:
        if not self.items:
            return "not widened"
        return "widened by " + ", ".join(f"{q}{'' if i is None else f'[{i}]'} +-{w:g}" for q, i, w in self.items)

    def to_list(self) -> list[str]:
        return [f"{q}{'' if i is None else f'[{i}]'}={w!r}" for q, i, w in self.items]


def parse_widening(items: Sequence[str]) -> Widening:
    """``["qpos=0.2", "qvel[1]=0.5"]`` -> Widening; ``["none"]`` -> no widening. Bad items raise InvalidInputError."""
    if list(items) == ["none"]:
        return Widening()
    parsed, problems = [], []
    for item in items:
        m = _ITEM.match(str(item))
        width = None
        if m:
            try:
                width = float(m.group(3))
            except ValueError:
                width = None
        if m is None or width is None or not np.isfinite(width) or width < 0:
            problems.append(f"--widen {item!r}: must be QUANTITY=HALF_WIDTH with a finite number >= 0, "
                            "e.g. qpos=0.2 or qvel[1]=0.5 (or 'none')")
            continue
        parsed.append((m.group(1), None if m.group(2) is None else int(m.group(2)), width))
    if problems:
        raise InvalidInputError(problems)
    return Widening(tuple(parsed))


def _coordinates(rig: Any, quantity: str, component: int | None) -> tuple[str, list[int]]:
    """(qpos or qvel, model indices) of a named quantity read straight from the state."""
    source = rig.sources.get(quantity)
    if source is None or source.field not in ("qpos", "qvel"):
        widenable = sorted(q for q, s in rig.sources.items() if s.field in ("qpos", "qvel"))
        what = "is not a named quantity" if quantity not in rig.layout.names else "is not read straight from qpos or qvel"
        raise InvalidInputError(f"--widen {quantity}: {what} of {rig.env_id}; widen one of {', '.join(widenable)}")
    index = list(source.index)
    if component is not None:
        if not 0 <= component < len(index):
            raise InvalidInputError(f"--widen {quantity}[{component}]: {quantity} has {len(index)} components (0 to {len(index) - 1})")
        index = [index[component]]
    return source.field, index


def widen_states(rig: Any, qpos: np.ndarray, qvel: np.ndarray, widening: Widening, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Add the widening's uniform noise (one draw per state, coordinate by coordinate) and clip limited joints."""
    from kinetome.envs.starts import respect_joints

    qpos, qvel = np.array(qpos, dtype=np.float64), np.array(qvel, dtype=np.float64)
    n = qpos.shape[0]
    for quantity, component, width in widening.items:
        field, index = _coordinates(rig, quantity, component)
        target = qpos if field == "qpos" else qvel
        target[:, index] += rng.uniform(-width, width, size=(n, len(index)))
    return respect_joints(rig.model, qpos), qvel


class _EveryState:
    """A starts_when that holds everywhere: the skill is run from every sampled state."""

    def __init__(self, names: Sequence[str]):
        self.names = tuple(names)

    def evaluate(self, values: Mapping[str, np.ndarray], *, batch: int | None = None) -> np.ndarray:
        n = next(len(values[q]) for q in self.names if q in values)
        return np.ones(n, dtype=bool)


@dataclass(frozen=True, eq=False)
class Samples:
    """Start states (name -> (n, *shape)), the outcome of each episode and whether it stopped (success)."""

    starts: dict[str, np.ndarray]
    outcome: np.ndarray  # (n,) EndReason values
    success: np.ndarray  # (n,) bool

    def outcome_counts(self) -> dict[str, int]:
        from ..runtime.records import EndReason

        return {EndReason(r).label: int(np.sum(self.outcome == r)) for r in (0, 1, 2)}


def sample_outcomes(
    loaded: Any, rig: Any, *, start: Any, widening: Widening, episodes: int, seed: int, workers: int = 1, progress: Any = None
) -> Samples:
    """Run ``loaded`` once from each of ``episodes`` start states (deterministic for ``seed``)."""
    from ..runtime.execute import run_skill
    from ..runtime.records import EndReason
    from ..runtime.starts import sample_starts

    qpos, qvel = sample_starts(rig, start, episodes, seed=[seed, 30])
    qpos, qvel = widen_states(rig, qpos, qvel, widening, np.random.default_rng([seed, 31]))
    anywhere = replace(loaded, starts_when=_EveryState(rig.layout.names))
    seg = run_skill(anywhere, rig, starts=(qpos, qvel), seed=seed, workers=workers, progress=progress).segments[0]
    starts = {k: np.asarray(v, dtype=np.float64) for k, v in seg.start_state.items() if not k.endswith("_jac")}
    return Samples(starts, np.asarray(seg.reason), np.asarray(seg.reason) == int(EndReason.STOPPED))

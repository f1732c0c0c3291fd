"""A robustness sweep as a validated value object: what to run, over which axes, how many episodes.

``SweepSpec`` names its target (a stored skill, a spec file, or a chain file), the base task
(variant and initial states; a chain brings its own), the axes (each a list of grid values,
or a range for random cells), the episodes per cell, the seed, the requirement, the
confidence and the correction across cells. Cells are the grid's product (first axis
slowest) or ``samples`` random points drawn from ``[seed, 19]``.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from ..errors import InvalidInputError, Problem
from ..runtime.disturbances import NO_DISTURBANCES, Disturbances
from .axes import AXES, check_axis_value
from .region import CORRECTIONS

__all__ = ["Axis", "SweepSpec", "DEFAULT_EPISODES", "DEFAULT_REQUIRE"]

DEFAULT_EPISODES = 200
DEFAULT_REQUIRE = 0.95
_SAMPLE_STREAM = 19


@dataclass(frozen=True)
class Axis:
    """One swept axis: grid ``values``, or a ``low``..``high`` range for random cells."""

    name: str
    values: tuple[float, ...] = ()
    low: float | None = None
    high: float | None = None

    @property
    def is_range(self) -> bool:
        return not self.values

    def to_dict(self) -> dict[str, Any]:
        unit = AXES[self.name].unit if self.name in AXES else ""
        if self.is_range:
            return {"name": self.name, "unit": unit, "low": self.low, "high": self.high}
        return {"name": self.name, "unit": unit, "values": list(self.values)}


@dataclass(frozen=True)
class SweepSpec:
    """A validated sweep. Exactly one of ``skill`` (a ref or spec path) and ``chain`` (a chain file).

    ``require`` None means the chain file's whole-chain requirement (else ``DEFAULT_REQUIRE``).
    ``samples`` None sweeps the grid; a number draws that many random cells over the ranges.
    """

    name: str
    axes: tuple[Axis, ...]
    skill: str | None = None
    chain: Path | None = None
    variant: Path | None = None
    initial_states: Path | None = None
    samples: int | None = None
    episodes: int = DEFAULT_EPISODES
    seed: int = 0
    require: float | None = None
    confidence: float = 0.95
    correction: str = "holm"
    disturbances: Disturbances = NO_DISTURBANCES
    description: str = ""
    source: str = field(default="<command line>", compare=False)
    lines: Mapping[str, int] = field(default_factory=dict, compare=False, repr=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "axes", tuple(self.axes))
        problems = spec_problems(self)
        if problems:
            raise InvalidInputError(problems)

    def problem(self, fieldname: str, message: str, fix: str = "") -> Problem:
        line = self.lines.get(fieldname) or self.lines.get(fieldname.split(".")[0])
        return Problem(self.source, line, fieldname, message, fix)

    @property
    def axis_names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.axes)

    def cells(self) -> list[dict[str, float]]:
        """Every cell's axis values, in cell-index order."""
        if self.samples is None:
            return [dict(zip(self.axis_names, combo)) for combo in itertools.product(*(a.values for a in self.axes))]
        import numpy as np

        rng = np.random.default_rng([int(self.seed), _SAMPLE_STREAM])
        out = []
        for _ in range(self.samples):
            cell = {}
            for a in self.axes:
                if AXES[a.name].integer:
                    cell[a.name] = int(rng.integers(int(a.low), int(a.high) + 1))
                else:
                    cell[a.name] = float(rng.uniform(a.low, a.high))
            out.append(cell)
        return out

    def settings(self) -> dict[str, Any]:
        """What, besides the identities and the task, decides the result (the evidence lookup key)."""
        return {
            "axes": [a.to_dict() for a in self.axes],
            "samples": self.samples,
            "episodes": self.episodes,
            "seed": self.seed,
            "require": self.require,
            "confidence": self.confidence,
            "correction": self.correction,
            "disturbances": self.disturbances.to_dict(),
        }


def _number(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def _count(x: Any, low: int) -> bool:
    return isinstance(x, int) and not isinstance(x, bool) and x >= low


def _axis_problems(s: SweepSpec, i: int, a: Axis) -> list[Problem]:
    where = f"axes.{a.name}"
    if a.name not in AXES:
        import difflib

        close = difflib.get_close_matches(str(a.name), list(AXES), n=1)
        hint = f"did you mean {close[0]!r}? " if close else ""
        return [s.problem(where, "unknown axis", f"{hint}axes: {', '.join(AXES)}")]
    out = []
    if s.samples is None:
        if a.is_range:
            return [s.problem(where, "is a range but the sweep is a grid", "give a list of values, or add samples: N for random cells")]
        if len(set(a.values)) != len(a.values):
            out.append(s.problem(where, f"lists a value twice: {list(a.values)}", "give each value once"))
        for j, v in enumerate(a.values):
            bad = check_axis_value(a.name, v)
            if bad:
                out.append(s.problem(f"{where}[{j}]", bad))
        return out
    if not a.is_range:
        return [s.problem(where, "is a list of values but samples: asks for random cells", f"give a range, e.g. {{low: 0.2, high: 1.5}}")]
    for label, v in (("low", a.low), ("high", a.high)):
        bad = check_axis_value(a.name, v)
        if bad:
            out.append(s.problem(f"{where}.{label}", bad))
    if not out and not a.low < a.high:
        out.append(s.problem(where, f"low must be below high, got {a.low} and {a.high}", "swap them or widen the range"))
    return out


def spec_problems(s: SweepSpec) -> list[Problem]:
    """Every problem with the values of a sweep (files and store are checked when it runs)."""
    out: list[Problem] = []
    if (s.skill is None) == (s.chain is None):
        out.append(s.problem("skill", "a sweep needs exactly one target: a skill or a chain file", "write skill: NAME or chain: FILE"))
    if s.chain is not None and (s.variant is not None or s.initial_states is not None):
        out.append(s.problem("task", "a chain brings its own task", "set the variant and initial states in the chain file"))
    if not s.axes:
        out.append(s.problem("axes", "must list at least one axis", "write e.g. axes: {payload_mass: [0.2, 0.6, 1.0]}"))
    names = [a.name for a in s.axes]
    for dup in sorted({n for n in names if names.count(n) > 1}):
        out.append(s.problem(f"axes.{dup}", "is given twice", "give each axis once"))
    for i, a in enumerate(s.axes):
        out += _axis_problems(s, i, a)
    if s.samples is not None and not _count(s.samples, 1):
        out.append(s.problem("samples", f"must be a whole number >= 1, got {s.samples!r}", "write e.g. samples: 20"))
    if not _count(s.episodes, 1):
        out.append(s.problem("episodes", f"must be a whole number >= 1, got {s.episodes!r}", "write e.g. episodes: 200"))
    if not _count(s.seed, 0):
        out.append(s.problem("seed", f"must be a whole number >= 0, got {s.seed!r}", "write e.g. seed: 0"))
    for label, value in (("require.success", s.require), ("confidence", s.confidence)):
        if not (value is None and label == "require.success") and not (_number(value) and 0 < value < 1):
            out.append(s.problem(label, f"must be a number strictly between 0 and 1, got {value!r}", "write e.g. 0.95"))
    if s.correction not in CORRECTIONS:
        out.append(s.problem("correction", f"must be one of {', '.join(CORRECTIONS)}, got {s.correction!r}", "write correction: holm"))
    swept = {a.name for a in s.axes}
    for name in swept & {"sensor_noise", "action_delay_steps"}:
        if getattr(s.disturbances, name):
            out.append(s.problem(f"disturbances.{name}", "is also a swept axis", f"remove it from disturbances or from axes"))
    return out

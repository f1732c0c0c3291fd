"""The axes a robustness sweep may vary, and how a cell's axis values become a task.

Five axes edit the task variant (``payload_mass``, ``friction``, ``actuator_gain``,
``floor_slope``, ``gravity``) and two the stochastic episodes (``sensor_noise``,
``action_delay_steps``, as in the checker's ``disturbances:``). ``gravity`` is swept as
the downward magnitude g (m/s^2): the cell's variant sets gravity to (0, 0, -g).
Pure: no MuJoCo, no store; each axis checks its own values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

__all__ = ["SweepAxis", "AXES", "axis_names", "check_axis_value", "cell_variant_fields", "cell_disturbances"]


@dataclass(frozen=True)
class SweepAxis:
    """One axis: its name, unit and meaning, what it edits (``variant`` or ``disturbances``),
    whether values are whole numbers, and the smallest value allowed (``exclusive``: strictly above)."""

    name: str
    unit: str
    meaning: str
    edits: str
    integer: bool = False
    low: float | None = None
    exclusive: bool = False
    high: float | None = None


AXES: dict[str, SweepAxis] = {
    a.name: a
    for a in (
        SweepAxis("payload_mass", "kg", "mass of the carried payload (variant payload_mass)", "variant", low=0.0, exclusive=True),
        SweepAxis("friction", "1", "sliding friction of floor and feet (variant friction)", "variant", low=0.0),
        SweepAxis("actuator_gain", "1", "factor on every motor's gear (variant actuator_gain)", "variant", low=0.0, exclusive=True),
        SweepAxis("floor_slope", "degrees", "floor tilt, positive rises toward +x (variant floor_slope)", "variant", low=-90.0, exclusive=True, high=90.0),
        SweepAxis("gravity", "m/s^2", "downward gravity magnitude g: variant gravity (0, 0, -g)", "variant", low=0.0),
        SweepAxis("sensor_noise", "state units", "std of noise on what controllers read (disturbances.sensor_noise)", "disturbances", low=0.0),
        SweepAxis("action_delay_steps", "steps", "command applied k steps late (disturbances.action_delay_steps)", "disturbances", integer=True, low=0.0),
    )
}


def axis_names() -> list[str]:
    return list(AXES)


def check_axis_value(name: str, value: Any) -> str | None:
    """None when ``value`` is a valid value of axis ``name``, else what is wrong (with a fix)."""
    axis = AXES[name]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        return f"must be a finite number in {axis.unit}, got {value!r}; write e.g. 1.0"
    if axis.integer and (not float(value).is_integer()):
        return f"must be a whole number of {axis.unit}, got {value!r}; write e.g. 2"
    if axis.low is not None and (value <= axis.low if axis.exclusive else value < axis.low):
        return f"must be {'>' if axis.exclusive else '>='} {axis.low:g} {axis.unit}, got {value!r}"
    if axis.high is not None and value >= axis.high:
        return f"must be < {axis.high:g} {axis.unit}, got {value!r}"
    return None


def _plain(value: Any) -> Any:
    return list(value) if isinstance(value, tuple) else value


def cell_variant_fields(base: Mapping[str, Any], values: Mapping[str, float]) -> dict[str, Any]:
    """The variant fields of one cell: the base variant's fields, then each variant axis's value."""
    fields = {k: _plain(v) for k, v in base.items()}
    for name, value in values.items():
        if AXES[name].edits != "variant":
            continue
        fields[name] = [0.0, 0.0, -float(value)] if name == "gravity" else float(value)
    return fields


def cell_disturbances(base: Mapping[str, Any], values: Mapping[str, float]) -> dict[str, Any]:
    """The ``disturbances`` mapping of one cell: the base's, with each disturbance axis's value."""
    out = dict(base)
    for name, value in values.items():
        if AXES[name].edits == "disturbances":
            out[name] = int(value) if AXES[name].integer else float(value)
    return out

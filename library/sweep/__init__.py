"""Robustness sweeps: evaluate a skill or chain over a grid (or random sample) of task variants
and disturbances, mark each cell against the requirement, and record the valid-for region.

Names load on first access, so ``show`` (which reads stored regions) stays light.
"""

from importlib import import_module
from typing import Any

_NAMES = {
    "AXES": "axes", "SweepAxis": "axes", "CORRECTIONS": "region", "mark_cells": "region", "one_sided_p_value": "region",
    "SWEEP_KIND": "run", "rank_axes": "run", "resolve_target": "run", "run_sweep": "run", "Axis": "spec", "SweepSpec": "spec",
    "load_sweep": "sweep_file", "parse_axis_option": "sweep_file", "stored_regions": "regions", "region_contains": "regions",
}
__all__ = sorted(_NAMES)


def __getattr__(name: str) -> Any:
    if name not in _NAMES:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    return getattr(import_module(f"{__name__}.{_NAMES[name]}"), name)

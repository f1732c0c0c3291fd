"""Robustness sweeps: evaluate a skill or chain over a grid (or random sample) of task variants
and disturbances, mark each cell against the requirement, and record the valid-for region."""

from .axes import AXES, SweepAxis
from .region import CORRECTIONS, mark_cells, one_sided_p_value
from .run import SWEEP_KIND, rank_axes, resolve_target, run_sweep
from .spec import Axis, SweepSpec
from .sweep_file import load_sweep, parse_axis_option

__all__ = ["AXES", "SweepAxis", "CORRECTIONS", "mark_cells", "one_sided_p_value", "SWEEP_KIND", "rank_axes", "resolve_target",
           "run_sweep", "Axis", "SweepSpec", "load_sweep", "parse_axis_option"]

"""What a controller knows about its robot: named-state layout, actuator limits and wiring."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from kinetome.envs.named_state import StateLayout

__all__ = ["ControllerContext", "context_from_rig"]


def _frozen_vector(value: Any) -> np.ndarray:
    arr = np.array(value, dtype=np.float64, copy=True).reshape(-1)
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class ControllerContext:
    """The robot as a controller sees it.

    ``action_low``/``action_high`` (n_act,) are the actuator limits every action
    is clipped to; ``actuated_qpos``/``actuated_qvel`` give, per actuator, the
    qpos/qvel index of the joint it drives; ``nv`` is the number of dofs (the
    width of a site Jacobian); ``dt`` is seconds per env step. ``jacobians``
    names the quantities whose ``<name>_jac`` the runtime can supply, or None
    when unknown (then it is not checked).
    """

    layout: StateLayout
    action_low: np.ndarray
    action_high: np.ndarray
    actuated_qpos: tuple[int, ...]
    actuated_qvel: tuple[int, ...]
    nv: int
    dt: float
    jacobians: tuple[str, ...] | None = None

    def __post_init__(self) -> None:
        low, high = _frozen_vector(self.action_low), _frozen_vector(self.action_high)
        object.__setattr__(self, "action_low", low)
        object.__setattr__(self, "action_high", high)
        object.__setattr__(self, "actuated_qpos", tuple(int(i) for i in self.actuated_qpos))
        object.__setattr__(self, "actuated_qvel", tuple(int(i) for i in self.actuated_qvel))
        if self.jacobians is not None:
            object.__setattr__(self, "jacobians", tuple(self.jacobians))
        if not isinstance(self.layout, StateLayout):
            raise TypeError(f"context layout must be a StateLayout, got {type(self.layout).__name__}")
        n = low.size
        if n < 1:
            raise ValueError("context action_low must have one entry per actuator, got none; a controller needs at least one actuator")
        if high.size != n:
            raise ValueError(f"context action_high must have {n} entries like action_low, got {high.size}")
        if not (np.all(np.isfinite(low)) and np.all(np.isfinite(high))):
            raise ValueError(f"context action limits must be finite, got low {low.tolist()} high {high.tolist()}; declare ctrlrange for every actuator")
        bad = np.flatnonzero(~(low < high))
        if bad.size:
            i = int(bad[0])
            raise ValueError(
                f"context action limits must have low < high, got [{low[i]:g}, {high[i]:g}] for actuator {i}; "
                "declare ctrlrange (ctrllimited) for every actuator"
            )
        if not isinstance(self.nv, (int, np.integer)) or self.nv < 1:
            raise ValueError(f"context nv must be a positive int, got {self.nv!r}")
        object.__setattr__(self, "nv", int(self.nv))
        if not (isinstance(self.dt, (int, float, np.floating)) and math.isfinite(self.dt) and self.dt > 0):
            raise ValueError(f"context dt must be a positive number of seconds, got {self.dt!r}")
        object.__setattr__(self, "dt", float(self.dt))
        nq = self.layout["qpos"].size if "qpos" in self.layout else None
        for label, index, size in (("actuated_qpos", self.actuated_qpos, nq), ("actuated_qvel", self.actuated_qvel, self.nv)):
            if len(index) != n:
                raise ValueError(f"context {label} must have one index per actuator ({n}), got {len(index)}")
            for i in index:
                if i < 0 or (size is not None and i >= size):
                    raise ValueError(f"context {label} indices must lie in [0, {size}), got {i}")

    @property
    def n_act(self) -> int:
        """Number of actuators (the action width)."""
        return int(self.action_low.size)

    @property
    def action_mid(self) -> np.ndarray:
        return (self.action_low + self.action_high) / 2.0

    @property
    def action_half_range(self) -> np.ndarray:
        return (self.action_high - self.action_low) / 2.0

    def envelope(self, names: tuple[str, ...] | list[str], fallback: float) -> tuple[np.ndarray, np.ndarray]:
        """Flat (low, high) of quantities ``names`` concatenated, from the layout's
        physical envelope where it is finite and non-empty, else [-fallback, fallback]."""
        lows, highs = [], []
        for name in names:
            q = self.layout[name]
            lo = np.full(q.size, -fallback) if q.low is None else np.asarray(q.low, dtype=np.float64)
            hi = np.full(q.size, fallback) if q.high is None else np.asarray(q.high, dtype=np.float64)
            usable = np.isfinite(lo) & np.isfinite(hi) & (lo < hi)
            lows.append(np.where(usable, lo, -fallback))
            highs.append(np.where(usable, hi, fallback))
        if not lows:
            return np.zeros(0), np.zeros(0)
        return np.concatenate(lows), np.concatenate(highs)

    def joint_range(self, fallback: float = 2 * math.pi) -> tuple[np.ndarray, np.ndarray]:
        """(low, high) (n_act,) of the actuated joints' positions: the layout's qpos
        envelope where known, else [-fallback, fallback] (two turns for hinges)."""
        if "qpos" not in self.layout:
            return np.full(self.n_act, -fallback), np.full(self.n_act, fallback)
        low, high = self.envelope(("qpos",), fallback)
        index = list(self.actuated_qpos)
        return low[index], high[index]


def context_from_rig(rig: Any) -> ControllerContext:
    """The context of a ``kinetome.envs.rig.Rig``."""
    return ControllerContext(
        layout=rig.layout,
        action_low=rig.action_low,
        action_high=rig.action_high,
        actuated_qpos=tuple(rig.actuated_qpos),
        actuated_qvel=tuple(rig.actuated_qvel),
        nv=int(rig.model.nv),
        dt=float(rig.dt),
        jacobians=tuple(rig.jacobian_sites),
    )

"""``task_pd``: task-space PD of a site through the Jacobian transpose."""

from __future__ import annotations

import torch

from .base import Controller
from .kernels import jacobian_transpose
from .kinds.task_pd import TaskPDKind, TASK_KP_MAX, TASK_KD_MAX, JOINT_DAMPING_MAX, WORKSPACE_FALLBACK
from .registry import register_kind

__all__ = ["TaskPD", "TASK_KP_MAX", "TASK_KD_MAX", "JOINT_DAMPING_MAX", "WORKSPACE_FALLBACK"]


@register_kind("task_pd")
class TaskPD(TaskPDKind, Controller):
    __doc__ = TaskPDKind.__doc__

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        site = self.settings["site"]
        force = self.p["kp"] * (self.p["setpoint"] - x[site]) - self.p["kd"] * x[f"{site}_vel"]
        jac = x[f"{site}_jac"].index_select(2, self._qvel_index)
        return jacobian_transpose(jac, force) - self.p["joint_damping"] * self.actuated_qvel(x) + self.p["bias"]

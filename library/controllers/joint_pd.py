"""``joint_pd``: joint-space PD control with feed-forward torque."""

from __future__ import annotations

import torch

from .base import Controller
from .kinds.joint_pd import JointPDKind, KP_MAX, KD_MAX
from .registry import register_kind

__all__ = ["JointPD", "KP_MAX", "KD_MAX"]


@register_kind("joint_pd")
class JointPD(JointPDKind, Controller):
    __doc__ = JointPDKind.__doc__

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        q, qd = self.actuated_qpos(x), self.actuated_qvel(x)
        return self.p["kp"] * (self.p["setpoint"] - q) - self.p["kd"] * qd + self.p["bias"]

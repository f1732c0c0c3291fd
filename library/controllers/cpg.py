"""``cpg``: a phase-locked oscillator gait tracked by joint PD."""

from __future__ import annotations

import math

import numpy as np
import torch

from .base import Controller
from .kinds.cpg import OscillatorGaitKind, FREQUENCY_MAX
from .registry import register_kind

__all__ = ["OscillatorGait", "FREQUENCY_MAX"]


@register_kind("cpg")
class OscillatorGait(OscillatorGaitKind, Controller):
    __doc__ = OscillatorGaitKind.__doc__

    def joint_targets(self, skill_time: torch.Tensor) -> torch.Tensor:
        """(B, n_act) q*(t) for skill times (B,) in seconds."""
        omega = (2.0 * math.pi) * self.p["frequency"]
        return self.p["offset"] + self.p["amplitude"] * torch.sin(omega * skill_time.unsqueeze(1) + self.p["phase"])

    def phase_angle(self, skill_time: np.ndarray) -> np.ndarray:
        """(B,) the shared oscillator's phase 2 pi frequency t, wrapped to [0, 2 pi), at skill times (B,) in seconds."""
        frequency = float(self.p["frequency"].detach())
        return np.mod(2.0 * math.pi * frequency * np.asarray(skill_time, dtype=np.float64), 2.0 * math.pi)

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        q, qd = self.actuated_qpos(x), self.actuated_qvel(x)
        return self.p["kp"] * (self.joint_targets(skill_time) - q) - self.p["kd"] * qd

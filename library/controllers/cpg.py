"""``cpg``: a phase-locked oscillator gait tracked by joint PD."""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np
import torch

from .base import Controller
from .context import ControllerContext
from .joint_pd import PER_ACTUATOR, gain_decls
from .params import ParamDecl
from .registry import register_kind

__all__ = ["OscillatorGait", "FREQUENCY_MAX"]

FREQUENCY_MAX = 10.0  # Hz, default upper bound: faster than any legged gait here


@register_kind("cpg")
class OscillatorGait(Controller):
    """A rhythmic gait: every actuated joint follows a sine of one shared frequency.

    q*(t) = offset + amplitude sin(2 pi frequency t + phase) with t the skill
    time in seconds, tracked by u = kp (q* - q) - kd qdot. The per-joint phases
    set the gait pattern (0 and pi for alternating legs). Use it for walking,
    hopping, swimming or any periodic motion where a few interpretable numbers
    (frequency, amplitudes, phase lags) are a good search space. It reads
    ``qpos``, ``qvel`` and the skill time.
    """

    @classmethod
    def _declare(cls, context: ControllerContext, options: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        n = context.n_act
        low, high = context.joint_range()
        return (
            ParamDecl("frequency", (), 0.0, FREQUENCY_MAX, 1.0, "oscillation frequency shared by all joints", "Hz",
                      limit_low=0.0, shape_help="give one number"),
            ParamDecl("amplitude", (n,), 0.0, math.pi, 0.0, "swing amplitude per joint", "rad",
                      limit_low=0.0, shape_help=PER_ACTUATOR),
            ParamDecl("phase", (n,), -2 * math.pi, 2 * math.pi, 0.0, "phase per joint", "rad",
                      shape_help=PER_ACTUATOR),
            ParamDecl("offset", (n,), low, high, np.clip(0.0, low, high), "centre of the swing per joint", "rad",
                      shape_help=PER_ACTUATOR),
            *gain_decls(context),
        )

    @classmethod
    def reads(cls, context: ControllerContext, options: Mapping[str, Any]) -> tuple[str, ...]:
        return ("qpos", "qvel")

    def joint_targets(self, skill_time: torch.Tensor) -> torch.Tensor:
        """(B, n_act) q*(t) for skill times (B,) in seconds."""
        omega = (2.0 * math.pi) * self.p["frequency"]
        return self.p["offset"] + self.p["amplitude"] * torch.sin(omega * skill_time.unsqueeze(1) + self.p["phase"])

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        q, qd = self.actuated_qpos(x), self.actuated_qvel(x)
        return self.p["kp"] * (self.joint_targets(skill_time) - q) - self.p["kd"] * qd

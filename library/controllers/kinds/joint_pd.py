"""Declaration of the ``joint_pd`` kind: its settings and parameters, without torch
(the torch implementation is ``controllers/joint_pd.py``)."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from ..context import ControllerContext
from ..kind import ControllerKind
from ..params import ParamDecl
from ..registry import declares_kind

__all__ = ["JointPDKind", "KP_MAX", "KD_MAX"]

# Default upper bounds of the gains, in ctrl units per rad (per rad/s); widen per skill.
KP_MAX = 1000.0
KD_MAX = 100.0
PER_ACTUATOR = "give one value per actuator"


def gain_decls(context: ControllerContext, *, kp_required: bool = True) -> tuple[ParamDecl, ParamDecl]:
    """``kp`` and ``kd`` (n_act,), both >= 0, shared by the joint-space kinds."""
    n = context.n_act
    return (
        ParamDecl("kp", (n,), 0.0, KP_MAX, None if kp_required else 0.0, "stiffness per actuated joint", "ctrl/rad",
                  limit_low=0.0, shape_help=PER_ACTUATOR),
        ParamDecl("kd", (n,), 0.0, KD_MAX, 0.0, "damping per actuated joint", "ctrl s/rad",
                  limit_low=0.0, shape_help=PER_ACTUATOR),
    )


def bias_decl(context: ControllerContext) -> ParamDecl:
    """Feed-forward ``bias`` (n_act,), default 0, bounded by the actuator range."""
    low, high = context.action_low, context.action_high
    return ParamDecl("bias", (context.n_act,), low, high, np.clip(0.0, low, high),
                     "feed-forward added to every action (e.g. gravity compensation)", "ctrl", shape_help=PER_ACTUATOR)


@declares_kind("joint_pd")
class JointPDKind(ControllerKind):
    """Drive each actuated joint to a target angle with a spring and damper.

    u = kp (setpoint - q) - kd qdot + bias, with q, qdot the actuated joints'
    positions and velocities. Use it to reach or hold a posture (a reach to a
    known joint configuration, a stance, a tuck); ``bias`` carries a constant
    feed-forward such as gravity compensation. It reads ``qpos`` and ``qvel``.
    """

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        low, high = context.joint_range()
        return (
            ParamDecl("setpoint", (context.n_act,), low, high, None, "joint angle each actuator drives to", "rad",
                      shape_help=PER_ACTUATOR),
            *gain_decls(context),
            bias_decl(context),
        )

    @classmethod
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        return ("qpos", "qvel")

"""Declaration of the ``cpg`` kind: its settings and parameters, without torch
(the torch implementation is ``controllers/cpg.py``)."""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np

from ..context import ControllerContext
from ..kind import ControllerKind
from ..params import ParamDecl
from ..registry import declares_kind
from .joint_pd import PER_ACTUATOR, gain_decls

__all__ = ["OscillatorGaitKind", "FREQUENCY_MAX"]

FREQUENCY_MAX = 10.0  # Hz, default upper bound: faster than any legged gait here


@declares_kind("cpg")
class OscillatorGaitKind(ControllerKind):
    """A rhythmic gait: every actuated joint follows a sine of one shared frequency.

    q*(t) = offset + amplitude sin(2 pi frequency t + phase) with t the skill
    time in seconds, tracked by u = kp (q* - q) - kd qdot. The per-joint phases
    set the gait pattern (0 and pi for alternating legs). Use it for walking,
    hopping, swimming or any periodic motion where a few interpretable numbers
    (frequency, amplitudes, phase lags) are a good search space. It reads
    ``qpos``, ``qvel`` and the skill time.
    """

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
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
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        return ("qpos", "qvel")

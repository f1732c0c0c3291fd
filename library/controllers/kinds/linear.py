"""Declaration of the ``linear`` kind: its settings and parameters, without torch
(the torch implementation is ``controllers/linear.py``)."""

from __future__ import annotations

from typing import Any, Mapping

import numpy as np

from ...errors import Problem
from ..context import ControllerContext
from ..inputs import DEFAULT_INPUTS, input_size, normalise_inputs
from ..kind import ControllerKind
from ..params import ParamDecl
from ..registry import declares_kind
from .joint_pd import bias_decl

__all__ = ["LinearFeedbackKind", "GAIN_MAX", "REFERENCE_FALLBACK"]

GAIN_MAX = 1000.0  # |gain| default bound, ctrl per input unit
REFERENCE_FALLBACK = 1000.0  # reference bounds where the layout gives no envelope


@declares_kind("linear")
class LinearFeedbackKind(ControllerKind):
    """Linear state feedback: u = gain (s - reference) + bias.

    ``s`` is the concatenation of the ``inputs`` quantities, flattened in the
    order listed (setting ``inputs``, default [qpos, qvel]). Use it for
    balancing and stabilising around an operating point (an LQR gain, a
    hand-tuned full-state feedback) or as a simple trainable policy that stays
    interpretable; ``gain`` is (n_act, n_in).
    """

    SETTINGS = {"inputs": DEFAULT_INPUTS}
    @classmethod
    def _normalise_settings(
        cls, context: ControllerContext, settings: dict[str, Any], where: str, problems: list[Problem]
    ) -> dict[str, Any]:
        return {**settings, "inputs": normalise_inputs(context, settings["inputs"], f"{where}.settings.inputs", problems)}

    @classmethod
    def _declare(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[ParamDecl, ...]:
        n, n_in = context.n_act, input_size(context, settings["inputs"])
        ref_low, ref_high = context.envelope(settings["inputs"], REFERENCE_FALLBACK)
        return (
            ParamDecl("gain", (n, n_in), -GAIN_MAX, GAIN_MAX, 0.0, "feedback gain, one row per actuator", "ctrl per input unit",
                      shape_help=f"give one row per actuator ({n}) with one column per input value ({n_in})"),
            ParamDecl("reference", (n_in,), ref_low, ref_high, np.clip(0.0, ref_low, ref_high),
                      "operating point of the flattened inputs", "input units",
                      shape_help=f"give one value per flattened input value ({n_in})"),
            bias_decl(context),
        )

    @classmethod
    def reads(cls, context: ControllerContext, settings: Mapping[str, Any]) -> tuple[str, ...]:
        return tuple(settings["inputs"])

"""``linear``: linear state feedback around a reference."""

from __future__ import annotations

import torch

from .base import Controller
from .kernels import flatten_inputs, matvec
from .kinds.linear import LinearFeedbackKind, GAIN_MAX, REFERENCE_FALLBACK
from .registry import register_kind

__all__ = ["LinearFeedback", "GAIN_MAX", "REFERENCE_FALLBACK"]


@register_kind("linear")
class LinearFeedback(LinearFeedbackKind, Controller):
    __doc__ = LinearFeedbackKind.__doc__

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        s = flatten_inputs(x, self.inputs)
        return matvec(s - self.p["reference"], self.p["gain"]) + self.p["bias"]

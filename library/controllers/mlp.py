"""``mlp``: a small multilayer perceptron policy squashed into the actuator range."""

from __future__ import annotations

from typing import Any

import torch

from .base import Controller
from .kernels import flatten_inputs, matvec
from .kinds.mlp import MLPPolicyKind, WEIGHT_BOUND, init_weights, ACTIVATION_NAMES
from .registry import register_kind

__all__ = ["MLPPolicy", "WEIGHT_BOUND", "init_weights", "ACTIVATION_NAMES", "ACTIVATIONS"]

ACTIVATIONS = {"tanh": torch.tanh, "relu": torch.relu}


@register_kind("mlp")
class MLPPolicy(MLPPolicyKind, Controller):
    __doc__ = MLPPolicyKind.__doc__

    def __init__(self, *args: Any, **kwargs: Any):
        super().__init__(*args, **kwargs)
        self._n_layers = len(self.settings["hidden"]) + 1
        self._activation = ACTIVATIONS[self.settings["activation"]]
        self._mid = torch.tensor(self.context.action_mid, dtype=torch.float64)
        self._half = torch.tensor(self.context.action_half_range, dtype=torch.float64)

    def _mean(self, x: dict[str, torch.Tensor], skill_time: torch.Tensor) -> torch.Tensor:
        z = (flatten_inputs(x, self.inputs) - self.fixed.input_mean) / self.fixed.input_std
        for i in range(self._n_layers):
            z = matvec(z, self.p[f"w{i}"]) + self.p[f"b{i}"]
            if i < self._n_layers - 1:
                z = self._activation(z)
        return self._mid + self._half * torch.tanh(z)

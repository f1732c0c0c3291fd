"""Termination objective with a deliberation cost, and the switch cost in the reward.

Harb, Bacon, Klissarov & Precup (AAAI 2018), "When waiting is not an option":
for the skill w running on arrival in s', the termination parameters follow
-d beta(s', w)/d theta * (A(s', w) + eta) with A(s', w) = Q(s', w) - V(s'), so
a skill stops only when switching beats continuing by more than eta. Each
switch also costs eta in the return.
"""

from __future__ import annotations

import numpy as np
import torch

__all__ = ["termination_loss", "apply_switch_cost"]


def termination_loss(
    beta: torch.Tensor,
    advantage: torch.Tensor,
    *,
    eta: float,
    weight: torch.Tensor | None = None,
) -> torch.Tensor:
    """Mean of beta(s', w) * (A(s', w) + eta), the loss whose gradient is the rule above.

    ``advantage`` is treated as a constant (detached); ``weight`` (same shape,
    0/1) drops samples whose termination was forced rather than learned.
    """
    if eta < 0:
        raise ValueError(f"deliberation_cost (eta) must be >= 0, got {eta}")
    if beta.shape != advantage.shape:
        raise ValueError(f"beta {tuple(beta.shape)} and advantage {tuple(advantage.shape)} must have one shape")
    terms = beta * (advantage.detach() + eta)
    if weight is None:
        return terms.mean()
    total = weight.sum()
    return (terms * weight).sum() / torch.clamp(total, min=1.0)


def apply_switch_cost(rewards: np.ndarray, switched: np.ndarray, *, eta: float) -> np.ndarray:
    """Rewards with eta subtracted at every step after which the skill switched."""
    if eta < 0:
        raise ValueError(f"deliberation_cost (eta) must be >= 0, got {eta}")
    rewards = np.asarray(rewards, dtype=np.float64)
    switched = np.asarray(switched, dtype=bool)
    if rewards.shape != switched.shape:
        raise ValueError(f"switched must have the shape of rewards {rewards.shape}, got {switched.shape}")
    return rewards - eta * switched

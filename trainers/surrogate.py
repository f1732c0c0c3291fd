"""Clipped surrogate policy objective with entropy bonus, and the value loss (torch)."""

from __future__ import annotations

import torch

__all__ = ["clipped_surrogate", "value_loss", "standardise_advantages"]


def standardise_advantages(advantages: torch.Tensor, *, eps: float = 1e-8) -> torch.Tensor:
    """Zero-mean, unit-std advantages (common practice for the clipped objective)."""
    if advantages.numel() < 2:
        return advantages - advantages.mean()
    return (advantages - advantages.mean()) / (advantages.std() + eps)


def clipped_surrogate(
    log_prob: torch.Tensor,
    old_log_prob: torch.Tensor,
    advantages: torch.Tensor,
    *,
    clip_ratio: float,
    entropy: torch.Tensor | None = None,
    entropy_weight: float = 0.0,
) -> tuple[torch.Tensor, dict[str, float]]:
    """Loss to minimise: -E[min(rho A, clip(rho, 1-e, 1+e) A)] - c_H E[H].

    rho = exp(log_prob - old_log_prob) (Schulman, Wolski, Dhariwal, Radford &
    Klimov 2017, eq. 7). Returns the loss and diagnostics: the approximate KL
    E[(rho - 1) - log rho] and the fraction of samples whose ratio was clipped.
    """
    if clip_ratio <= 0:
        raise ValueError(f"clip_ratio must be > 0, got {clip_ratio}")
    log_ratio = log_prob - old_log_prob
    ratio = torch.exp(log_ratio)
    unclipped = ratio * advantages
    clipped = torch.clamp(ratio, 1.0 - clip_ratio, 1.0 + clip_ratio) * advantages
    policy_loss = -torch.minimum(unclipped, clipped).mean()
    loss = policy_loss
    mean_entropy = 0.0
    if entropy is not None:
        mean_entropy_t = entropy.mean()
        loss = loss - entropy_weight * mean_entropy_t
        mean_entropy = float(mean_entropy_t.detach())
    with torch.no_grad():
        approx_kl = float(((ratio - 1.0) - log_ratio).mean())
        clip_fraction = float(((ratio - 1.0).abs() > clip_ratio).double().mean())
    return loss, {
        "policy_loss": float(policy_loss.detach()),
        "entropy": mean_entropy,
        "approx_kl": approx_kl,
        "clip_fraction": clip_fraction,
    }


def value_loss(
    values: torch.Tensor,
    returns: torch.Tensor,
    *,
    old_values: torch.Tensor | None = None,
    clip: float | None = None,
) -> torch.Tensor:
    """0.5 E[(V - R)^2]; with ``clip``, the larger of the plain and the clipped error.

    The clipped form keeps V within ``clip`` of the value recorded at rollout
    time (a common-practice variant of the clipped objective applied to the critic).
    """
    error = (values - returns) ** 2
    if clip is not None:
        if old_values is None:
            raise ValueError("value_loss with clip needs old_values; pass the rollout values")
        clipped = old_values + torch.clamp(values - old_values, -clip, clip)
        error = torch.maximum(error, (clipped - returns) ** 2)
    return 0.5 * error.mean()

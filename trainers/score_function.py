"""Score-function (likelihood-ratio) gradient estimator, the core of every policy gradient."""

from __future__ import annotations

from typing import Callable

import torch

__all__ = ["score_function_gradient"]


def score_function_gradient(
    log_prob: Callable[[torch.Tensor], torch.Tensor],
    samples: torch.Tensor,
    rewards: torch.Tensor,
    parameters: list[torch.Tensor],
    *,
    baseline: float | torch.Tensor = 0.0,
) -> list[torch.Tensor]:
    """Estimate d E[r(a)]/d theta = E[(r(a) - b) d log p(a; theta)/d theta].

    ``log_prob(samples)`` must return log p of each sample under the current
    parameters (one value per sample); the samples themselves carry no gradient.
    A constant baseline ``b`` keeps the estimator unbiased and lowers its
    variance (Williams 1992).
    """
    samples = samples.detach()
    weights = (rewards - baseline).detach()
    lp = log_prob(samples)
    if lp.shape != weights.shape:
        raise ValueError(f"log_prob must give one value per sample {tuple(weights.shape)}, got {tuple(lp.shape)}")
    surrogate = (weights * lp).mean()
    return list(torch.autograd.grad(surrogate, parameters))

"""Small torch networks of the trainer: the critic over (state, skill) and termination heads."""

from __future__ import annotations

import math

import torch
from torch import nn

__all__ = ["mlp", "SkillCritic", "TerminationHeads"]


def mlp(n_in: int, hidden: tuple[int, ...], n_out: int, *, out_gain: float = 1.0) -> nn.Sequential:
    """tanh MLP, orthogonal init (common practice for on-policy actor-critic), float64."""
    layers: list[nn.Module] = []
    width = n_in
    for h in hidden:
        lin = nn.Linear(width, h, dtype=torch.float64)
        nn.init.orthogonal_(lin.weight, gain=math.sqrt(2.0))
        nn.init.zeros_(lin.bias)
        layers += [lin, nn.Tanh()]
        width = h
    out = nn.Linear(width, n_out, dtype=torch.float64)
    nn.init.orthogonal_(out.weight, gain=out_gain)
    nn.init.zeros_(out.bias)
    layers.append(out)
    return nn.Sequential(*layers)


class SkillCritic(nn.Module):
    """Q(s, w) for every skill w at once: features (B, n_features) -> (B, n_skills)."""

    def __init__(self, n_features: int, n_skills: int, hidden: tuple[int, ...] = (64, 64)):
        super().__init__()
        self.n_skills = n_skills
        self.net = mlp(n_features, hidden, n_skills, out_gain=1.0)

    def forward(self, features: torch.Tensor) -> torch.Tensor:
        return self.net(features)


class TerminationHeads(nn.Module):
    """Sigmoid termination probability beta(s, w) per skill: (B, n_features) -> (B, n_skills) logits.

    With ``hidden = ()`` each head is linear in the normalised features. The
    output bias starts at ``init_logit`` (e.g. -2: beta about 0.12).
    """

    def __init__(self, n_features: int, n_skills: int, hidden: tuple[int, ...] = (), *, init_logit: float = -2.0):
        super().__init__()
        self.net = mlp(n_features, hidden, n_skills, out_gain=0.01)
        with torch.no_grad():
            self.net[-1].bias.fill_(init_logit)

    def forward(self, features: torch.Tensor) -> torch.Tensor:
        return self.net(features)

    def beta(self, features: torch.Tensor, skills: torch.Tensor) -> torch.Tensor:
        """beta(s, w) for the given skill of each row: (B,)."""
        logits = self.net(features)
        return torch.sigmoid(logits.gather(1, skills.long().view(-1, 1)).squeeze(1))

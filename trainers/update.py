"""One update of the option actor-critic from a rollout: policies, critic, terminations."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import torch

from kinetome.library.errors import TrainingError

from .config import TrainConfig
from .gae import gae
from .rollout import Rollout
from .surrogate import clipped_surrogate, standardise_advantages, value_loss
from .termination import termination_loss
from .trainable import TrainableSkill

__all__ = ["update_from_rollout", "check_finite_parameters"]


def check_finite_parameters(modules: dict[str, torch.nn.Module], *, where: str) -> None:
    """Raise ``TrainingError`` naming the first parameter that is NaN/Inf."""
    for label, module in modules.items():
        for name, p in module.named_parameters():
            if not torch.all(torch.isfinite(p)):
                raise TrainingError(
                    f"parameter {label}.{name} must be finite, got NaN/Inf {where}; "
                    "lower learning_rate or gradient_norm_cap, or tighten the controller bounds"
                )


@dataclass
class _Samples:
    """A rollout flattened to (B, ...) tensors, B = T x N, with its advantages and returns."""

    features: torch.Tensor
    skill: torch.Tensor
    skill_time: torch.Tensor
    actions: torch.Tensor
    old_log_prob: torch.Tensor
    old_values: torch.Tensor
    advantages: torch.Tensor
    returns: torch.Tensor
    inputs: dict[str, torch.Tensor]
    term_features: torch.Tensor | None = None
    term_weight: torch.Tensor | None = None
    term_advantage: torch.Tensor | None = None

    @property
    def size(self) -> int:
        return int(self.skill.shape[0])


def _samples(rollout: Rollout, adv: np.ndarray, ret: np.ndarray, *, with_terminations: bool) -> _Samples:
    B = rollout.rewards.size

    def flat(a: np.ndarray) -> torch.Tensor:
        return torch.from_numpy(np.ascontiguousarray(a.reshape(B, *a.shape[2:])))

    out = _Samples(
        features=flat(rollout.features), skill=flat(rollout.skill), skill_time=flat(rollout.skill_time),
        actions=flat(rollout.actions), old_log_prob=flat(rollout.log_prob), old_values=flat(rollout.values),
        advantages=flat(adv), returns=flat(ret), inputs={k: flat(v) for k, v in rollout.inputs.items()},
    )
    if with_terminations:
        out.term_features = flat(rollout.term_features)
        out.term_weight = flat(rollout.term_weight)
        out.term_advantage = flat(rollout.term_advantage)
    return out


def _policy_loss(skills: Sequence[TrainableSkill], s: _Samples, idx: torch.Tensor, mb_adv: torch.Tensor,
                 config: TrainConfig) -> tuple[torch.Tensor, dict[str, float]]:
    """Clipped surrogate of every skill on its own rows of the minibatch, weighted by its share."""
    mb_skill = s.skill[idx]
    pol_loss = torch.zeros((), dtype=torch.float64)
    info_acc = {"policy_loss": 0.0, "entropy": 0.0, "approx_kl": 0.0, "clip_fraction": 0.0}
    for k, sk in enumerate(skills):
        sel = torch.nonzero(mb_skill == k).squeeze(1)
        if sel.numel() == 0:
            continue
        rows = idx[sel]
        names = (*sk.reads, *sk.needs)
        dist = sk.controller.distribution({n: s.inputs[n][rows] for n in names}, s.skill_time[rows])
        lp = dist.log_prob(s.actions[rows]).sum(-1)
        ent = dist.entropy().sum(-1)
        loss_k, info = clipped_surrogate(
            lp, s.old_log_prob[rows], mb_adv[sel], clip_ratio=config.clip_ratio, entropy=ent, entropy_weight=config.entropy_weight
        )
        share = sel.numel() / idx.numel()
        pol_loss = pol_loss + share * loss_k
        for key in info_acc:
            info_acc[key] += share * info[key]
    return pol_loss, info_acc


def _descend(loss: torch.Tensor, optimiser: torch.optim.Optimizer, skills: Sequence[TrainableSkill],
             config: TrainConfig, *, where: str) -> None:
    """One optimiser step on policies and critic: clip the gradient norm, then project into bounds."""
    if not torch.isfinite(loss):
        raise TrainingError(f"loss must be finite, got {float(loss)} at {where}; lower learning_rate, or check the reward for NaN/Inf")
    params = [p for g in optimiser.param_groups for p in g["params"]]
    optimiser.zero_grad(set_to_none=True)
    loss.backward()
    torch.nn.utils.clip_grad_norm_(params, config.gradient_norm_cap)
    optimiser.step()
    for sk in skills:
        sk.controller.project_()


def _termination_step(heads: torch.nn.Module, optimiser: torch.optim.Optimizer, s: _Samples, idx: torch.Tensor,
                      *, eta: float, update_index: int) -> float:
    """One step of the termination heads on beta(s', w) (A(s', w) + eta), learned decisions only."""
    beta = heads.beta(s.term_features[idx], s.skill[idx])
    t_loss = termination_loss(beta, s.term_advantage[idx], eta=eta, weight=s.term_weight[idx])
    if not torch.isfinite(t_loss):
        raise TrainingError(f"termination loss must be finite, got {float(t_loss)} at update {update_index}")
    optimiser.zero_grad(set_to_none=True)
    t_loss.backward()
    optimiser.step()
    return float(t_loss.detach())


def update_from_rollout(
    rollout: Rollout,
    *,
    skills: Sequence[TrainableSkill],
    critic: torch.nn.Module,
    heads: torch.nn.Module | None,
    optimiser: torch.optim.Optimizer,
    term_optimiser: torch.optim.Optimizer | None,
    config: TrainConfig,
    generator: torch.Generator,
    update_index: int,
) -> dict[str, float]:
    """Run ``update_passes`` passes of minibatch steps; return mean losses and diagnostics.

    Terminations learn in the first pass only; a pass stops early once the
    approximate KL exceeds 1.5 x ``policy_shift_limit``.
    """
    cfg = config
    adv, ret = gae(rollout.rewards, rollout.values, rollout.dones, rollout.last_values, gamma=cfg.gamma, lambda_=cfg.lambda_)
    learn_term = heads is not None and term_optimiser is not None and float(rollout.term_weight.sum()) > 0
    s = _samples(rollout, adv, ret, with_terminations=learn_term)
    eta = cfg.deliberation_cost * rollout.reward_scale
    sums: dict[str, float] = {}
    count = 0
    stop_early = False
    for epoch in range(cfg.update_passes):
        perm = torch.randperm(s.size, generator=generator)
        for start in range(0, s.size, cfg.minibatch_size):
            idx = perm[start : start + cfg.minibatch_size]
            mb_adv = standardise_advantages(s.advantages[idx]) if cfg.standardise_advantages else s.advantages[idx]
            pol_loss, info = _policy_loss(skills, s, idx, mb_adv, cfg)
            q = critic(s.features[idx]).gather(1, s.skill[idx].view(-1, 1)).squeeze(1)
            v_loss = value_loss(q, s.returns[idx], old_values=s.old_values[idx], clip=cfg.critic_clip)
            _descend(pol_loss + cfg.critic_loss_weight * v_loss, optimiser, skills, cfg, where=f"update {update_index}, epoch {epoch}")
            t_loss = 0.0
            if learn_term and epoch == 0:
                t_loss = _termination_step(heads, term_optimiser, s, idx, eta=eta, update_index=update_index)
            for key, val in {**info, "value_loss": float(v_loss.detach()), "termination_loss": t_loss}.items():
                sums[key] = sums.get(key, 0.0) + val
            count += 1
            # stop the update once the policy has moved too far from the one that collected the data
            if cfg.policy_shift_limit is not None and info["approx_kl"] > 1.5 * cfg.policy_shift_limit:
                stop_early = True
                break
        if stop_early:
            break
    out = {key: val / max(count, 1) for key, val in sums.items()}
    var_ret = float(np.var(ret))
    out["explained_variance"] = float(1.0 - np.var(ret - rollout.values) / var_ret) if var_ret > 0 else math.nan
    out["stopped_early"] = float(stop_early)
    return out

"""One update of the option actor-critic from a rollout: policies, critic, terminations."""

from __future__ import annotations

import math
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
    """Run ``update_passes`` passes of minibatch steps; return mean losses and diagnostics."""
    cfg = config
    adv, ret = gae(rollout.rewards, rollout.values, rollout.dones, rollout.last_values, gamma=cfg.gamma, lambda_=cfg.lambda_)
    T, N = rollout.rewards.shape
    B = T * N

    def flat(a: np.ndarray) -> torch.Tensor:
        return torch.from_numpy(np.ascontiguousarray(a.reshape(B, *a.shape[2:])))

    feats, skill, stime = flat(rollout.features), flat(rollout.skill), flat(rollout.skill_time)
    actions, old_lp, old_v = flat(rollout.actions), flat(rollout.log_prob), flat(rollout.values)
    adv_t, ret_t = flat(adv), flat(ret)
    inputs = {k: flat(v) for k, v in rollout.inputs.items()}
    learn_term = heads is not None and term_optimiser is not None and float(rollout.term_weight.sum()) > 0
    if learn_term:
        t_feats, t_w, t_adv = flat(rollout.term_features), flat(rollout.term_weight), flat(rollout.term_advantage)
    eta = cfg.deliberation_cost * rollout.reward_scale
    all_params = [p for g in optimiser.param_groups for p in g["params"]]
    sums: dict[str, float] = {}
    count = 0
    stop_early = False
    for epoch in range(cfg.update_passes):
        perm = torch.randperm(B, generator=generator)
        epoch_kl: list[float] = []
        for start in range(0, B, cfg.minibatch_size):
            idx = perm[start : start + cfg.minibatch_size]
            mb_adv = adv_t[idx]
            if cfg.standardise_advantages:
                mb_adv = standardise_advantages(mb_adv)
            mb_skill = skill[idx]
            pol_loss = torch.zeros((), dtype=torch.float64)
            info_acc = {"policy_loss": 0.0, "entropy": 0.0, "approx_kl": 0.0, "clip_fraction": 0.0}
            for k, sk in enumerate(skills):
                sel = torch.nonzero(mb_skill == k).squeeze(1)
                if sel.numel() == 0:
                    continue
                rows = idx[sel]
                names = (*sk.reads, *sk.needs)
                dist = sk.controller.distribution({n: inputs[n][rows] for n in names}, stime[rows])
                lp = dist.log_prob(actions[rows]).sum(-1)
                ent = dist.entropy().sum(-1)
                loss_k, info = clipped_surrogate(
                    lp, old_lp[rows], mb_adv[sel], clip_ratio=cfg.clip_ratio, entropy=ent, entropy_weight=cfg.entropy_weight
                )
                share = sel.numel() / idx.numel()
                pol_loss = pol_loss + share * loss_k
                for key in info_acc:
                    info_acc[key] += share * info[key]
            q = critic(feats[idx]).gather(1, mb_skill.view(-1, 1)).squeeze(1)
            v_loss = value_loss(q, ret_t[idx], old_values=old_v[idx], clip=cfg.critic_clip)
            loss = pol_loss + cfg.critic_loss_weight * v_loss
            if not torch.isfinite(loss):
                raise TrainingError(
                    f"loss must be finite, got {float(loss)} at update {update_index}, epoch {epoch}; "
                    "lower learning_rate, or check the reward for NaN/Inf"
                )
            optimiser.zero_grad(set_to_none=True)
            loss.backward()
            torch.nn.utils.clip_grad_norm_(all_params, cfg.gradient_norm_cap)
            optimiser.step()
            for sk in skills:
                sk.controller.project_()
            t_loss_value = 0.0
            if learn_term and epoch == 0:
                beta = heads.beta(t_feats[idx], mb_skill)
                t_loss = termination_loss(beta, t_adv[idx], eta=eta, weight=t_w[idx])
                if not torch.isfinite(t_loss):
                    raise TrainingError(f"termination loss must be finite, got {float(t_loss)} at update {update_index}")
                term_optimiser.zero_grad(set_to_none=True)
                t_loss.backward()
                term_optimiser.step()
                t_loss_value = float(t_loss.detach())
            stats = {**info_acc, "value_loss": float(v_loss.detach()), "termination_loss": t_loss_value}
            for key, val in stats.items():
                sums[key] = sums.get(key, 0.0) + val
            count += 1
            epoch_kl.append(info_acc["approx_kl"])
            # stop the update once the policy has moved too far from the one that collected the data
            if cfg.policy_shift_limit is not None and info_acc["approx_kl"] > 1.5 * cfg.policy_shift_limit:
                stop_early = True
                break
        if stop_early:
            break
    out = {key: val / max(count, 1) for key, val in sums.items()}
    var_ret = float(np.var(ret))
    out["explained_variance"] = float(1.0 - np.var(ret - rollout.values) / var_ret) if var_ret > 0 else math.nan
    out["stopped_early"] = float(stop_early)
    return out

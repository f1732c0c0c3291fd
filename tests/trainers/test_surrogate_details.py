"""The clipped-surrogate implementation details the flat trainer applies, each as a unit.

Observation and reward normalisation: test_normaliser.py; advantage standardisation, critic clipping and both
clip sides: test_surrogate.py; the policy's orthogonal init: tests/library/controllers/test_kinds.py. Here:
the critic's orthogonal init, learning-rate annealing, the gradient-norm cap and the minibatch size.
"""

from __future__ import annotations

import numpy as np
import pytest
import torch

from kinetome.trainers.nets import SkillCritic
from kinetome.trainers.option_critic import OptionCriticTrainer
from kinetome.trainers.update import _descend

from .pointmass import make_pointmass, quick_config, reach_skill


def test_critic_layers_are_orthogonal_with_the_usual_gains():
    # torch.nn.init.orthogonal_: orthonormal rows or columns times the gain (sqrt 2 hidden, 1 last; common practice)
    critic = SkillCritic(6, 3, (64, 32))
    w0, w1, w2 = (critic.net[i].weight.detach().numpy() for i in (0, 2, 4))
    np.testing.assert_allclose(w0.T @ w0, 2.0 * np.eye(6), atol=1e-12)  # (64, 6): orthonormal columns
    np.testing.assert_allclose(w1 @ w1.T, 2.0 * np.eye(32), atol=1e-12)  # (32, 64): orthonormal rows
    np.testing.assert_allclose(w2 @ w2.T, np.eye(3), atol=1e-12)
    assert all(float(critic.net[i].bias.abs().max()) == 0.0 for i in (0, 2, 4))


@pytest.mark.parametrize("schedule, expected", [("linear", [0.02, 0.015, 0.01, 0.005]), ("constant", [0.02] * 4)])
def test_learning_rate_anneals_linearly_to_zero(schedule, expected):
    rig = make_pointmass()
    cfg = quick_config(env_step_budget=16 * 32 * 4, learning_rate_schedule=schedule)
    trainer = OptionCriticTrainer([reach_skill(rig)], rig, cfg, episode_per_skill=True)
    rows = trainer.run().rows
    np.testing.assert_allclose([r["learning_rate"] for r in rows], expected)  # lr_u = lr (1 - u / updates)
    assert trainer.optimiser.param_groups[0]["lr"] == pytest.approx(expected[-1])


@pytest.mark.parametrize("scale, moved", [(1000.0, 0.5), (1e-3, 1e-3 * np.sqrt(2.0))])
def test_gradient_norm_cap_bounds_one_step(scale, moved):
    # With plain SGD at rate 1 a step moves the parameters by exactly the (capped) gradient:
    # a huge gradient moves them by the cap 0.5, a small one by its own norm.
    p = torch.nn.Parameter(torch.zeros(2, dtype=torch.float64))
    opt = torch.optim.SGD([p], lr=1.0)
    loss = scale * p.sum()  # gradient (scale, scale), norm scale * sqrt 2
    _descend(loss, opt, [], quick_config(gradient_norm_cap=0.5), where="test")
    assert float(p.detach().norm()) == pytest.approx(min(moved, 0.5))


def test_minibatches_have_the_configured_size_and_cover_every_sample():
    rig = make_pointmass()
    cfg = quick_config(env_step_budget=16 * 32, update_passes=3, minibatch_size=96)  # 512 samples: 5 x 96 + 32
    trainer = OptionCriticTrainer([reach_skill(rig)], rig, cfg, episode_per_skill=True)
    sizes: list[int] = []
    critic_forward = trainer.critic.forward

    def counting(features):
        sizes.append(int(features.shape[0]))
        return critic_forward(features)

    trainer.critic.forward = counting
    trainer.collector.start()
    rollout = trainer.collector.collect()
    sizes.clear()
    from kinetome.trainers.update import update_from_rollout

    update_from_rollout(rollout, skills=trainer.skills, critic=trainer.critic, heads=None, optimiser=trainer.optimiser,
                        term_optimiser=None, config=cfg, generator=trainer.torch_gen, update_index=1)
    assert sizes == [96, 96, 96, 96, 96, 32] * 3

"""The Gaussian exploration head against scipy's normal distribution."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats
import torch

from kinetome.library.controllers import build_controller

from .examples import EXAMPLES, TINY, example_ids, tiny_states


@pytest.mark.parametrize("example", EXAMPLES, ids=example_ids())
def test_log_prob_matches_scipy_norm_logpdf_summed_over_action_dims(example):
    c = example.build()
    states, t = tiny_states(25, seed=21), np.linspace(0, 1, 25)
    dist = c.distribution(states, t)
    actions = np.random.default_rng(22).uniform(TINY.action_low, TINY.action_high, size=(25, TINY.n_act))
    ours = dist.log_prob(torch.from_numpy(actions)).sum(-1).detach().numpy()
    loc = c.mean(states, t).detach().numpy()
    scale = np.exp(c.log_std.detach().numpy())
    # Reference: scipy.stats.norm.logpdf, summed over the independent action dimensions.
    ref = scipy.stats.norm.logpdf(actions, loc=loc, scale=scale).sum(-1)
    np.testing.assert_allclose(ours, ref, rtol=1e-12, atol=1e-12)
    # Reference: scipy.stats.norm.entropy, summed likewise.
    np.testing.assert_allclose(dist.entropy().sum(-1).detach().numpy(), scipy.stats.norm.entropy(scale=scale).sum(), rtol=1e-12)


def test_log_prob_gradient_reaches_log_std():
    c = EXAMPLES[0].build()
    states, t = tiny_states(8, seed=23), np.zeros(8)
    a = torch.from_numpy(c.act(states, t))
    c.distribution(states, t).log_prob(a).sum().backward()
    # d/d log_std of log N(a; m, e^s) = ((a - m)^2 / e^{2s}) - 1; at a = m it is -1 per row.
    mean = c.mean(states, t).detach().numpy()
    inside = np.all((mean > TINY.action_low) & (mean < TINY.action_high), axis=0)
    np.testing.assert_allclose(c.log_std.grad.numpy()[inside], -8.0 * np.ones(inside.sum()), rtol=1e-12)


def test_exploration_noise_has_the_declared_std():
    c = build_controller("joint_pd", TINY, parameters={"setpoint": [0.0, 0.5], "kp": [1.0, 1.0]}, exploration_std=[0.05, 0.1])
    n = 20000
    states = {"qpos": np.zeros((n, 3)), "qvel": np.zeros((n, 3))}
    mean = c.act(states, np.zeros(n))
    a = c.act(states, np.zeros(n), explore=True, generator=torch.Generator().manual_seed(0))
    z = (a - mean) / np.array([0.05, 0.1])
    # Means sit >= 10 std inside the limits, so clipping never acts. With n = 20000
    # standard-normal draws the sample mean has std 1/sqrt(n) = 0.007 and the sample
    # std has std ~ 1/sqrt(2n) = 0.005; tolerances of 0.03 are over 4 standard errors (a 4-sigma margin: common practice).
    assert np.all(np.abs(z.mean(axis=0)) < 0.03)
    assert np.all(np.abs(z.std(axis=0) - 1.0) < 0.03)
    # Reference: scipy.stats.kstest against the standard normal (p > 0.001: a
    # correct sampler fails one seed in a thousand; this seed is fixed).
    for j in range(2):
        assert scipy.stats.kstest(z[:, j], "norm").pvalue > 1e-3

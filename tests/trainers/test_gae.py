"""GAE against its two limiting definitions (Schulman, Moritz, Levine, Jordan & Abbeel 2016; equation numbers from memory)."""

import numpy as np
import pytest

from kinetome.trainers.gae import gae


def _rollout(seed, T=17, N=5):
    rng = np.random.default_rng(seed)
    rewards = rng.normal(size=(T, N))
    values = rng.normal(size=(T, N))
    dones = rng.random((T, N)) < 0.2
    last = rng.normal(size=N)
    return rewards, values, dones, last


def _monte_carlo(rewards, dones, last, gamma):
    T, N = rewards.shape
    out = np.zeros((T, N))
    for n in range(N):
        for t in range(T):
            g, k = 0.0, t
            while True:
                g += gamma ** (k - t) * rewards[k, n]
                if dones[k, n]:
                    break
                k += 1
                if k == T:
                    g += gamma ** (T - t) * last[n]
                    break
            out[t, n] = g
    return out


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_lambda_one_is_monte_carlo_return_minus_baseline(seed):
    # Schulman et al. 2016, eq. 18 (from memory): GAE(gamma, 1) = sum_l gamma^l r_{t+l} - V(s_t)
    rewards, values, dones, last = _rollout(seed)
    adv, ret = gae(rewards, values, dones, last, gamma=0.97, lambda_=1.0)
    mc = _monte_carlo(rewards, dones, last, 0.97)
    np.testing.assert_allclose(adv, mc - values, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(ret, mc, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_lambda_zero_is_one_step_td_error(seed):
    # Schulman et al. 2016, eq. 17 (from memory): GAE(gamma, 0) = r_t + gamma V(s_{t+1}) - V(s_t)
    rewards, values, dones, last = _rollout(seed)
    adv, _ = gae(rewards, values, dones, last, gamma=0.9, lambda_=0.0)
    next_values = np.concatenate([values[1:], last[None]], axis=0)
    td = rewards + 0.9 * (~dones) * next_values - values
    np.testing.assert_allclose(adv, td, rtol=1e-12, atol=1e-12)


def test_general_lambda_is_discounted_sum_of_td_errors():
    # Schulman et al. 2016, eq. 16 (from memory): A_t = sum_l (gamma lambda)^l delta_{t+l}, cut at episode ends
    rewards, values, dones, last = _rollout(7)
    gamma, lambda_ = 0.95, 0.8
    adv, _ = gae(rewards, values, dones, last, gamma=gamma, lambda_=lambda_)
    next_values = np.concatenate([values[1:], last[None]], axis=0)
    delta = rewards + gamma * (~dones) * next_values - values
    T, N = rewards.shape
    for n in range(N):
        for t in range(T):
            total, k, w = 0.0, t, 1.0
            while k < T:
                total += w * delta[k, n]
                if dones[k, n]:
                    break
                w *= gamma * lambda_
                k += 1
            assert adv[t, n] == pytest.approx(total, abs=1e-12)


def test_episode_boundary_stops_credit_flowing_back():
    rewards = np.array([[0.0], [0.0], [100.0]])
    values = np.zeros((3, 1))
    dones = np.array([[False], [True], [False]])
    adv, _ = gae(rewards, values, dones, np.zeros(1), gamma=1.0, lambda_=1.0)
    assert adv[:2, 0].tolist() == [0.0, 0.0]
    assert adv[2, 0] == 100.0


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(rewards=np.zeros(3)), "rewards must be (T, N)"),
        (dict(values=np.zeros((2, 2))), "values must have the shape of rewards"),
        (dict(dones=np.zeros((3, 1), bool)), "dones must have the shape of rewards"),
        (dict(last_values=np.zeros(3)), "last_values must be (N,)"),
        (dict(gamma=1.5), "gamma and lambda must lie in [0, 1]"),
    ],
)
def test_bad_inputs_are_reported(kwargs, message):
    args = dict(rewards=np.zeros((3, 2)), values=np.zeros((3, 2)), dones=np.zeros((3, 2), bool), last_values=np.zeros(2))
    opts = dict(gamma=0.9, lambda_=0.9)
    for key in ("gamma", "lambda_"):
        if key in kwargs:
            opts[key] = kwargs.pop(key)
    args.update(kwargs)
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)").replace("[", r"\[").replace("]", r"\]")):
        gae(**args, **opts)

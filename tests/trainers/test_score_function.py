"""Score-function gradient on a one-step Gaussian bandit vs. its closed form (Williams 1992, from memory)."""

import math

import pytest
import torch

from kinetome.trainers.score_function import score_function_gradient


@pytest.mark.parametrize("mu0, sigma, c", [(0.0, 1.0, 1.5), (2.0, 0.5, -1.0), (-1.0, 2.0, 0.0)])
def test_gaussian_bandit_gradient_matches_closed_form(mu0, sigma, c):
    # r(a) = -(a - c)^2, a ~ N(mu, sigma^2): E[r] = -((mu - c)^2 + sigma^2), so dE[r]/dmu = -2 (mu - c)
    # and dE[r]/dsigma = -2 sigma (closed form, the reference).
    gen = torch.Generator().manual_seed(1234)
    n = 200_000
    mu = torch.tensor(mu0, dtype=torch.float64, requires_grad=True)
    log_sigma = torch.tensor(math.log(sigma), dtype=torch.float64, requires_grad=True)
    with torch.no_grad():
        a = mu + sigma * torch.randn(n, generator=gen, dtype=torch.float64)
    r = -((a - c) ** 2)

    def log_prob(x):
        return torch.distributions.Normal(mu, torch.exp(log_sigma)).log_prob(x)

    # baseline = mean reward (a constant for the estimate's variance; its bias is O(1/n))
    g_mu, g_log_sigma = score_function_gradient(log_prob, a, r, [mu, log_sigma], baseline=float(r.mean()))
    exact_mu = -2.0 * (mu0 - c)
    exact_log_sigma = -2.0 * sigma**2  # chain rule: dE/dlog sigma = sigma dE/dsigma
    # Tolerance: 5 standard errors of the sample mean (common practice), measured from the per-sample terms
    # (r - b)(a - mu)/sigma^2 and (r - b)((a - mu)^2/sigma^2 - 1); a false alarm has odds ~ 1e-6.
    with torch.no_grad():
        z = (a - mu0) / sigma
        w = r - r.mean()
        se_mu = float((w * z / sigma).std()) / math.sqrt(n)
        se_ls = float((w * (z**2 - 1)).std()) / math.sqrt(n)
    assert se_mu < 0.05 and se_ls < 0.1  # the check is sharp enough to catch a wrong estimator
    assert abs(float(g_mu) - exact_mu) < 5 * se_mu
    assert abs(float(g_log_sigma) - exact_log_sigma) < 5 * se_ls


def test_log_prob_shape_is_checked():
    mu = torch.tensor(0.0, requires_grad=True)
    with pytest.raises(ValueError, match="one value per sample"):
        score_function_gradient(lambda x: x.sum(), torch.zeros(3), torch.zeros(3), [mu])

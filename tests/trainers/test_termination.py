"""Termination objective with deliberation cost (Harb, Bacon, Klissarov & Precup, AAAI 2018, from memory)."""

import numpy as np
import pytest
import torch

from kinetome.trainers.termination import apply_switch_cost, termination_loss


def _beta_after_one_step(advantage, eta, lr=1.0):
    logit = torch.zeros(1, requires_grad=True)  # beta = 0.5
    loss = termination_loss(torch.sigmoid(logit), torch.tensor([advantage]), eta=eta)
    loss.backward()
    with torch.no_grad():
        logit -= lr * logit.grad
    return float(torch.sigmoid(logit))


def test_small_disadvantage_within_the_margin_keeps_the_skill_running():
    # A(s', w) = -0.005 > -eta: switching is not better by the margin eta = 0.01, so beta falls.
    assert _beta_after_one_step(-0.005, 0.01) < 0.5


def test_disadvantage_beyond_the_margin_makes_the_skill_stop():
    # A(s', w) = -0.05 < -eta: another skill is better by more than eta, so beta rises.
    assert _beta_after_one_step(-0.05, 0.01) > 0.5


def test_gradient_is_dbeta_times_advantage_plus_eta():
    # d/dlogit [sigmoid(x) (A + eta)] = sigmoid(x)(1 - sigmoid(x)) (A + eta), Harb et al. 2018, the termination gradient (from memory)
    logit = torch.tensor([0.3], requires_grad=True)
    termination_loss(torch.sigmoid(logit), torch.tensor([0.2]), eta=0.05).backward()
    s = float(torch.sigmoid(torch.tensor(0.3)))
    assert float(logit.grad) == pytest.approx(s * (1 - s) * 0.25, rel=1e-6)


def test_weight_drops_forced_samples_and_advantage_is_constant():
    beta = torch.tensor([0.5, 0.5], requires_grad=True)
    adv = torch.tensor([1.0, -1.0], requires_grad=True)
    loss = termination_loss(beta, adv, eta=0.0, weight=torch.tensor([1.0, 0.0]))
    loss.backward()
    assert float(loss) == pytest.approx(0.5)
    assert beta.grad.tolist() == [1.0, 0.0]
    assert adv.grad is None or float(adv.grad.abs().sum()) == 0.0


def test_a_switch_costs_eta_in_the_reward():
    r = np.array([[1.0, 1.0], [2.0, 2.0]])
    switched = np.array([[True, False], [False, True]])
    np.testing.assert_allclose(apply_switch_cost(r, switched, eta=0.1), [[0.9, 1.0], [2.0, 1.9]])


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: termination_loss(torch.zeros(1), torch.zeros(1), eta=-0.1), "eta"),
        (lambda: termination_loss(torch.zeros(2), torch.zeros(1), eta=0.1), "must have one shape"),
        (lambda: apply_switch_cost(np.zeros(2), np.zeros(3, bool), eta=0.1), "switched must have the shape"),
        (lambda: apply_switch_cost(np.zeros(2), np.zeros(2, bool), eta=-1.0), "must be >= 0"),
    ],
)
def test_errors(call, message):
    with pytest.raises(ValueError, match=message):
        call()

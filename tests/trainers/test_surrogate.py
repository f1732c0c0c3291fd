"""Clipped surrogate objective (Schulman et al. 2017, eq. 7, from memory) and the value loss."""

import math

import pytest
import torch

from kinetome.trainers.surrogate import clipped_surrogate, standardise_advantages, value_loss


def test_unclipped_region_matches_importance_weighted_advantage():
    old = torch.tensor([0.0, 0.0])
    new = torch.tensor([0.05, -0.05], requires_grad=True)
    adv = torch.tensor([1.0, 2.0])
    loss, info = clipped_surrogate(new, old, adv, clip_ratio=0.2)
    expected = -(math.exp(0.05) * 1.0 + math.exp(-0.05) * 2.0) / 2
    assert float(loss) == pytest.approx(expected, rel=1e-6)
    assert info["clip_fraction"] == 0.0


def test_clipping_removes_gradient_beyond_the_trust_region():
    # Positive advantage with ratio above 1 + eps: the min picks the clipped (constant) term.
    old = torch.tensor([0.0])
    new = torch.tensor([math.log(1.5)], requires_grad=True)
    loss, info = clipped_surrogate(new, old, torch.tensor([1.0]), clip_ratio=0.2)
    loss.backward()
    assert float(loss) == pytest.approx(-1.2)
    assert float(new.grad) == 0.0
    assert info["clip_fraction"] == 1.0
    # Negative advantage with ratio above 1 + eps: the unclipped term is the smaller one, gradient stays.
    new2 = torch.tensor([math.log(1.5)], requires_grad=True)
    loss2, _ = clipped_surrogate(new2, old, torch.tensor([-1.0]), clip_ratio=0.2)
    loss2.backward()
    assert float(loss2) == pytest.approx(1.5)
    assert float(new2.grad) == pytest.approx(1.5)


@pytest.mark.parametrize(
    "ratio, adv, loss, grad",
    [
        # Schulman et al. 2017, eq. 7 and Figure 1 (from memory): min(r A, clip(r, 1 - e, 1 + e) A), e = 0.2
        (1.5, 1.0, -1.2, 0.0),  # upper side, A > 0: clipped at 1 + e, no gradient
        (1.5, -1.0, 1.5, 1.5),  # upper side, A < 0: the unclipped term is smaller, gradient -A r
        (0.5, -1.0, 0.8, 0.0),  # lower side, A < 0: clipped at 1 - e, no gradient
        (0.5, 1.0, -0.5, -0.5),  # lower side, A > 0: the unclipped term is smaller, gradient -A r
        (1.1, 1.0, -1.1, -1.1),  # inside the trust region: unclipped either way
    ],
)
def test_both_clip_sides(ratio, adv, loss, grad):
    new = torch.tensor([math.log(ratio)], requires_grad=True)
    value, info = clipped_surrogate(new, torch.tensor([0.0]), torch.tensor([adv]), clip_ratio=0.2)
    value.backward()
    assert float(value) == pytest.approx(loss)
    assert float(new.grad) == pytest.approx(grad)  # d/d log_prob of -r A is -r A
    assert info["clip_fraction"] == (0.0 if ratio == 1.1 else 1.0)


def test_entropy_bonus_lowers_the_loss():
    lp = torch.zeros(4)
    base, _ = clipped_surrogate(lp, lp, torch.ones(4), clip_ratio=0.2)
    with_h, info = clipped_surrogate(lp, lp, torch.ones(4), clip_ratio=0.2, entropy=torch.full((4,), 2.0), entropy_weight=0.01)
    assert float(with_h) == pytest.approx(float(base) - 0.02)
    assert info["entropy"] == pytest.approx(2.0)


def test_value_loss_plain_and_clipped():
    v = torch.tensor([1.0, 3.0])
    r = torch.tensor([0.0, 0.0])
    assert float(value_loss(v, r)) == pytest.approx(0.5 * (1 + 9) / 2)
    old = torch.tensor([0.0, 0.0])
    # clipped prediction 0 + clamp(3, -0.5, 0.5) = 0.5 has the smaller error, so max keeps 9
    assert float(value_loss(v, r, old_values=old, clip=0.5)) == pytest.approx(0.5 * (1 + 9) / 2)
    # moving towards the return beyond the clip: clipped error (-0.5 - -2)^2 = 2.25 is the larger
    v2, r2 = torch.tensor([-2.0]), torch.tensor([-2.0])
    assert float(value_loss(v2, r2, old_values=torch.zeros(1), clip=0.5)) == pytest.approx(0.5 * 2.25)


def test_standardise_advantages():
    a = standardise_advantages(torch.tensor([1.0, 2.0, 3.0, 4.0]))
    assert float(a.mean()) == pytest.approx(0.0, abs=1e-7)
    assert float(a.std()) == pytest.approx(1.0, rel=1e-6)


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: clipped_surrogate(torch.zeros(1), torch.zeros(1), torch.zeros(1), clip_ratio=0.0), "clip_ratio must be > 0"),
        (lambda: value_loss(torch.zeros(1), torch.zeros(1), clip=0.2), "needs old_values"),
    ],
)
def test_errors(call, message):
    with pytest.raises(ValueError, match=message):
        call()

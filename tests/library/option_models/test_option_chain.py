"""Chain prediction from option models against closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from kinetome.library.option_models import predict_chain

from option_model_examples import linear_models

GAMMA = 0.95
M1 = np.array([[0.5, 1.0], [-1.0, 0.2]])
C1 = np.array([0.3, -0.4])
M2 = np.array([[2.0, 0.0], [0.1, 0.9]])
A1, B1 = np.array([1.0, -2.0]), 0.5
A2, B2 = np.array([-0.7, 3.0]), 2.0


def _two_skills(p_stop_b: float = 1.0):
    a = linear_models(ref="a@1", gamma=GAMMA, steps=12, reward_w=A1, reward_b=B1, end_m=M1, end_c=C1)
    b = linear_models(ref="b@1", gamma=GAMMA, steps=7, reward_w=A2, reward_b=B2, end_m=M2, p_stop=p_stop_b)
    return a, b


def test_deterministic_linear_chain_matches_closed_form() -> None:
    # Closed form for deterministic end states x2 = M1 x + c1 and constant durations
    # k1, k2 (option-model composition, Sutton, Precup & Singh 1999, from memory):
    # steps = k1 + k2, return = R1(x) + gamma^k1 R2(x2), end discount = gamma^(k1+k2).
    a, b = _two_skills()
    x = np.array([[0.1, 0.2], [-1.0, 2.0], [3.0, -0.5]])
    pred = predict_chain([a, b], {"x": x}, rng=np.random.default_rng(0))
    x2 = x @ M1.T + C1
    ret = x @ A1 + B1 + GAMMA**12 * (x2 @ A2 + B2)
    assert pred.steps.mean == pytest.approx(19.0, rel=1e-12)
    assert pred.steps.std == pytest.approx(0.0, abs=1e-12)
    assert pred.discounted_return.mean == pytest.approx(ret.mean(), rel=1e-12)
    assert pred.discounted_return.std == pytest.approx(np.std(ret, ddof=1), rel=1e-10)
    assert pred.discount.mean == pytest.approx(GAMMA**19, rel=1e-12)
    assert pred.success.mean == pytest.approx(1.0)
    assert pred.reach == (1.0, 1.0)


def test_stop_probability_weights_later_skills() -> None:
    # Skill a stops with probability 1; b stops with 0.6 and times out otherwise, and
    # has no end-state model for timeouts, so a chain a, b, a reaches its third skill
    # with probability 0.6 and runs 12 + 7 + 0.6 * 12 steps on average.
    a, b = _two_skills(p_stop_b=0.6)
    x = np.zeros((4, 2))
    pred = predict_chain([a, b], {"x": x}, rng=np.random.default_rng(0))
    assert pred.success.mean == pytest.approx(0.6, rel=1e-12)
    # the last skill hands over after a stop or a timeout: the discount out of the chain is gamma^19
    assert pred.discount.mean == pytest.approx(GAMMA**19, rel=1e-12)
    pred3 = predict_chain([a, b, a], {"x": x}, rng=np.random.default_rng(0))
    assert pred3.reach == pytest.approx((1.0, 1.0, 0.6))
    assert pred3.handoffs[1].unmodelled == pytest.approx(0.4)
    assert pred3.steps.mean == pytest.approx(12 + 7 + 0.6 * 12, rel=1e-12)
    x2 = x @ M1.T + C1
    x3 = x2 @ M2.T
    expect = B1 + GAMMA**12 * (x2 @ A2 + B2) + GAMMA**12 * 0.6 * GAMMA**7 * (x3 @ A1 + B1)
    assert pred3.discounted_return.mean == pytest.approx(expect.mean(), rel=1e-12)
    # only stops hand over: the timeout mass ends the chain either way
    no_to = predict_chain([a, b], {"x": x}, rng=np.random.default_rng(0), handoff_after_timeout=False)
    assert no_to.discount.mean == pytest.approx(0.6 * GAMMA**19, rel=1e-12)


def test_timed_out_turns_hand_over_from_their_own_end_states() -> None:
    # a stops w.p. 0.6 ending at M1 x + c1, else times out ending at MT x; both after 12
    # steps. The runtime starts b after either, so
    # return = R1(x) + gamma^12 (0.6 R2(M1 x + c1) + 0.4 R2(MT x)), success = 0.6 * 1.
    # Outcomes are sampled per particle: with 20,000 particles the Monte Carlo se of
    # the mean is reported, and the check allows 4 se.
    mt = np.array([[0.0, 1.0], [1.0, 0.0]])
    a = linear_models(ref="a@1", gamma=GAMMA, steps=12, reward_w=A1, reward_b=B1, end_m=M1, end_c=C1, p_stop=0.6, timeout_m=mt)
    b = linear_models(ref="b@1", gamma=GAMMA, steps=7, reward_w=A2, reward_b=B2, end_m=None)
    x = np.array([[0.5, -1.0]])
    pred = predict_chain([a, b], {"x": x}, rng=np.random.default_rng(1), samples=20_000, accepts=[lambda v: v["x"][:, 0] > 0])
    r2 = lambda s: s @ A2 + B2  # noqa: E731
    stop_end, to_end = x @ M1.T + C1, x @ mt.T
    ok_stop, ok_to = stop_end[0, 0] > 0, to_end[0, 0] > 0
    expect = x @ A1 + B1 + GAMMA**12 * (0.6 * r2(stop_end) * ok_stop + 0.4 * r2(to_end) * ok_to)
    assert pred.discounted_return.mean == pytest.approx(expect[0], abs=4 * pred.discounted_return.se + 1e-12)
    (h,) = pred.handoffs
    assert h.reach == pytest.approx(1.0) and h.after_stop == pytest.approx(0.6, abs=0.015)  # binomial sd 0.0035
    assert h.accepted == pytest.approx(0.6 * ok_stop + 0.4 * ok_to, abs=0.015)
    assert h.accepted_after_stop == pytest.approx(float(ok_stop))
    assert pred.success.mean == pytest.approx(0.6 * ok_stop, abs=0.015)
    assert pred.reach[1] == pytest.approx(h.accepted, rel=1e-12)


def test_handoff_acceptance_matches_gaussian_probability() -> None:
    # End state of a = start + N(0, 0.5^2) noise (a pool of 20,000 Gaussian residuals);
    # the next skill accepts x[0] > 0, so P(accept | x) = Phi(x0 / 0.5) (scipy.stats.norm).
    # 20,000 particles: MC sd ~0.0035, pool error ~0.0035; tolerance 0.02 is > 4 sd (common practice).
    rng = np.random.default_rng(7)
    pool = rng.normal(0.0, 0.5, size=(20_000, 2))
    a = linear_models(ref="a@1", gamma=GAMMA, steps=5, reward_w=np.zeros(2), reward_b=1.0, end_m=np.eye(2), residuals=pool)
    b = linear_models(ref="b@1", gamma=GAMMA, steps=5, reward_w=np.zeros(2), reward_b=1.0, end_m=None)
    x = np.array([[-0.4, 0.0], [0.0, 0.0], [0.3, 1.0], [1.0, -1.0]])
    pred = predict_chain([a, b], {"x": x}, rng=np.random.default_rng(8), samples=5000, accepts=[lambda v: v["x"][:, 0] > 0])
    expect = np.mean(stats.norm.cdf(x[:, 0] / 0.5))
    (handoff,) = pred.handoffs
    assert handoff.accepted == pytest.approx(expect, abs=0.02)
    assert handoff.se == pytest.approx(np.sqrt(expect * (1 - expect) / 20_000), rel=0.05)
    # a refused handoff ends the chain: b runs only when accepted
    assert pred.reach[1] == pytest.approx(handoff.accepted, rel=1e-12)
    assert pred.steps.mean == pytest.approx(5 + 5 * handoff.accepted, rel=1e-12)
    assert pred.discounted_return.mean == pytest.approx(1 + GAMMA**5 * handoff.accepted, rel=1e-12)


def test_chain_without_end_state_model_stops_at_that_skill() -> None:
    a = linear_models(ref="a@1", gamma=GAMMA, steps=5, reward_w=np.zeros(2), reward_b=1.0, end_m=None)
    pred = predict_chain([a, a], {"x": np.zeros((3, 2))}, rng=np.random.default_rng(0))
    assert pred.reach == (1.0, 0.0)
    assert pred.steps.mean == pytest.approx(5.0)


def _raises_value_error(v):
    raise ValueError("values must include 'fingertip' (shape (3,)) used by the predicate")


def _bad_accepts(v):
    return v["x"][:, 0]  # float, not bool


@pytest.mark.parametrize(
    "build, kwargs, expected",
    [
        (lambda: [], {}, "a chain needs at least one skill's models"),
        (
            lambda: [_two_skills()[0], linear_models(ref="c@1", gamma=0.9, steps=1, reward_w=np.zeros(2), reward_b=0.0, end_m=None)],
            {},
            "every skill's models must share one gamma",
        ),
        (lambda: list(_two_skills()), {"accepts": [None, None]}, "accepts must give one callable (or None) per handoff (1), got 2"),
        (lambda: list(_two_skills()), {"accepts": [_bad_accepts]}, "accepts for handoff 1 must return a (2,) bool array, got float64"),
        (lambda: list(_two_skills()), {"accepts": [lambda v: v["qvel"][:, 0] > 0]}, "accepts for handoff 1 read 'qvel'"),
        (lambda: list(_two_skills()), {"samples": 0}, "samples (particles per start state) must be >= 1"),
        (
            lambda: list(_two_skills()),
            {"accepts": [_raises_value_error]},
            "accepts for handoff 1 failed on sampled end states with ['x']: values must include 'fingertip'",
        ),
    ],
)
def test_predict_chain_rejects_bad_input(build, kwargs, expected: str) -> None:
    with pytest.raises(ValueError) as info:
        predict_chain(build(), {"x": np.zeros((2, 2))}, rng=np.random.default_rng(0), **kwargs)
    assert expected in str(info.value)


def test_next_skill_reading_unpredicted_quantities_is_rejected() -> None:
    a = _two_skills()[0]
    b = linear_models(ref="b@1", gamma=GAMMA, steps=7, reward_w=A2, reward_b=B2, end_m=None, name="y")
    with pytest.raises(ValueError) as info:
        predict_chain([a, b], {"x": np.zeros((2, 2))}, rng=np.random.default_rng(0))
    assert "skill 2 (b@1) reads start quantities ['y'] that skill 1 (a@1)'s stopped end-state model does not predict" in str(info.value)

"""Epsilon-greedy policy over skills: probabilities, values and sampling."""

import numpy as np
import pytest

from kinetome.trainers.skill_policy import NO_SKILL, choose_skills, skill_probabilities, skill_values


def test_probabilities_respect_availability():
    q = np.array([[1.0, 3.0, 2.0], [5.0, 0.0, 1.0]])
    avail = np.array([[True, False, True], [False, False, False]])
    p = skill_probabilities(q, avail, epsilon=0.2)
    np.testing.assert_allclose(p[0], [0.1, 0.0, 0.9])  # best available is skill 2
    np.testing.assert_allclose(p[1], [0.0, 0.0, 0.0])  # none available: no choice at all
    assert p[0].sum() == pytest.approx(1.0)


def test_no_available_skill_means_no_choice_and_zero_value():
    q = np.array([[1.0, 3.0], [2.0, -1.0]])
    avail = np.array([[False, False], [True, True]])
    rng = np.random.default_rng(0)
    assert choose_skills(q, avail, epsilon=0.1, rng=rng)[0] == NO_SKILL
    assert choose_skills(q, avail, epsilon=0.0, rng=rng)[1] == 0
    np.testing.assert_allclose(skill_values(q, avail, epsilon=0.0), [0.0, 2.0])


def test_value_is_expected_q_under_the_choice():
    q = np.array([[1.0, 3.0, 2.0]])
    v = skill_values(q, np.ones((1, 3), bool), epsilon=0.3)
    assert v[0] == pytest.approx(0.7 * 3.0 + 0.3 * 2.0)


def test_sampling_frequencies_match_probabilities():
    rng = np.random.default_rng(0)
    q = np.tile([[0.0, 1.0, 0.5]], (20000, 1))
    picks = choose_skills(q, np.ones_like(q, bool), epsilon=0.3, rng=rng)
    freq = np.bincount(picks, minlength=3) / picks.size
    # binomial std at n = 20000 is below 0.004; 4 std tolerance (common practice)
    np.testing.assert_allclose(freq, [0.1, 0.8, 0.1], atol=0.016)


def test_shapes_are_checked():
    with pytest.raises(ValueError, match="must both be"):
        skill_probabilities(np.zeros((2, 3)), np.ones((2, 2), bool), epsilon=0.1)

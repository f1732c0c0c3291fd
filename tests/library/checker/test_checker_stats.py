"""Exact binomial bounds against scipy, the zero-failure bound and the episodes-to-decide solver."""

from __future__ import annotations

import math

import pytest
from scipy.stats import beta, binomtest

from kinetome.library.checker.stats import (
    clopper_pearson,
    episodes_for_zero_failures,
    episodes_to_decide,
    lower_bound,
    upper_bound,
    zero_failure_bound,
)

TABLE = [(95, 100), (0, 10), (10, 10), (0, 1), (1, 1), (3, 7), (50, 100), (199, 200), (1, 1000), (0, 59), (59, 59), (17, 23)]


@pytest.mark.parametrize("k, n", TABLE)
@pytest.mark.parametrize("confidence", [0.9, 0.95, 0.99])
def test_clopper_pearson_matches_scipy_binomtest(k, n, confidence):
    # Reference: scipy.stats.binomtest(k, n).proportion_ci(method="exact") (Clopper-Pearson).
    ref = binomtest(k, n).proportion_ci(confidence_level=confidence, method="exact")
    low, high = clopper_pearson(k, n, confidence)
    assert low == pytest.approx(ref.low, abs=1e-10)
    assert high == pytest.approx(ref.high, abs=1e-10)


def test_95_of_100_published_values():
    # Reference values: scipy.stats.binomtest(95, 100).proportion_ci(method="exact").
    low, high = clopper_pearson(95, 100, 0.95)
    assert (round(low, 6), round(high, 6)) == (0.887165, 0.983568)


@pytest.mark.parametrize("n", [1, 5, 59, 100])
def test_edges_k_zero_and_k_n(n):
    low0, high0 = clopper_pearson(0, n, 0.95)
    lown, highn = clopper_pearson(n, n, 0.95)
    assert low0 == 0.0 and highn == 1.0
    # k = 0: upper end 1 - (alpha/2)^(1/n); k = n: lower end (alpha/2)^(1/n) (closed forms of the beta quantile).
    assert high0 == pytest.approx(1 - 0.025 ** (1 / n), rel=1e-9)
    assert lown == pytest.approx(0.025 ** (1 / n), rel=1e-9)


def test_no_trials_gives_the_whole_unit_interval():
    assert clopper_pearson(0, 0, 0.95) == (0.0, 1.0)


@pytest.mark.parametrize("k, n", [(3, 10), (95, 100), (0, 20)])
def test_one_sided_bounds_are_beta_quantiles(k, n):
    # Clopper-Pearson one-sided bounds (from memory; the test above checks them against scipy):
    # Beta(alpha; k, n-k+1) and Beta(1-alpha; k+1, n-k).
    assert lower_bound(k, n, 0.95) == pytest.approx(beta.ppf(0.05, k, n - k + 1) if k else 0.0)
    assert upper_bound(k, n, 0.95) == pytest.approx(beta.ppf(0.95, k + 1, n - k))


@pytest.mark.parametrize("n", [1, 10, 59, 300, 1000])
def test_zero_failure_bound_closed_form_and_rule_of_three(n):
    bound = zero_failure_bound(n, 0.95)
    assert bound == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-12)
    # The same bound from the exact one-sided interval with no failures.
    assert bound == pytest.approx(1 - lower_bound(n, n, 0.95), rel=1e-9)
    # Rule of three (Hanley & Lippman-Hand 1983, from memory): about 3/n at 95%, from above since -ln(0.05) = 2.996 < 3
    # and 1 - exp(-x) < x; the relative gap shrinks like 1.5/n (second-order term), 2% from n = 100 on.
    assert bound < 3 / n
    if n >= 100:
        assert bound == pytest.approx(3 / n, rel=0.02)


def test_59_clean_trials_are_needed_to_claim_095():
    # 0.05^(1/59) = 0.9505 >= 0.95 but 0.05^(1/58) = 0.9497 < 0.95.
    assert episodes_for_zero_failures(0.95, 0.95) == 59
    assert 1 - zero_failure_bound(59, 0.95) >= 0.95
    assert 1 - zero_failure_bound(58, 0.95) < 0.95
    # Rule of three gives n = 3 / 0.05 = 60 as the cross-check (Hanley & Lippman-Hand 1983, from memory).
    assert abs(episodes_for_zero_failures(0.95, 0.95) - 3 / 0.05) <= 1


@pytest.mark.parametrize("k, n, require", [(97, 100, 0.95), (90, 100, 0.95), (48, 50, 0.9), (10, 12, 0.6), (1, 2, 0.3)])
def test_episodes_to_decide_is_the_smallest_that_decides(k, n, require):
    more = episodes_to_decide(k, n, require=require, confidence=0.95)
    assert more is not None and more >= 0
    rate = k / n
    m = n + more

    def decided(total):
        if rate > require:
            return lower_bound(rate * total, total, 0.95) >= require
        return upper_bound(rate * total, total, 0.95) < require

    assert decided(m)
    if more > 0:
        assert not decided(m - 1)


def test_episodes_to_decide_undecidable_cases():
    assert episodes_to_decide(95, 100, require=0.95, confidence=0.95) is None  # rate equals require
    assert episodes_to_decide(0, 0, require=0.95, confidence=0.95) is None  # nothing observed
    assert episodes_to_decide(100, 100, require=0.95, confidence=0.95) == 0  # already decided


@pytest.mark.parametrize(
    "call, message",
    [
        (lambda: clopper_pearson(5, 3, 0.95), "0 <= k <= n"),
        (lambda: clopper_pearson(-1, 3, 0.95), "0 <= k <= n"),
        (lambda: clopper_pearson(1, 3, 1.0), "confidence must be in (0, 1)"),
        (lambda: clopper_pearson(1, 3, 0.0), "confidence must be in (0, 1)"),
        (lambda: episodes_to_decide(1, 3, require=1.0, confidence=0.95), "require must be in (0, 1)"),
        (lambda: episodes_for_zero_failures(0.0, 0.95), "require must be in (0, 1)"),
    ],
)
def test_bad_arguments_are_rejected(call, message):
    with pytest.raises(ValueError, match=re_escape(message)):
        call()


def re_escape(text: str) -> str:
    import re

    return re.escape(text)


def test_interval_is_monotone_in_confidence():
    lo90, hi90 = clopper_pearson(30, 40, 0.9)
    lo99, hi99 = clopper_pearson(30, 40, 0.99)
    assert lo99 < lo90 < 0.75 < hi90 < hi99
    assert not math.isnan(lo90)

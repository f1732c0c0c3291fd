"""Verdict rule from counts (composes / breaks / unsure, one-sided bounds) and the exit code of a whole check."""

from __future__ import annotations

import math

import pytest

from kinetome.library.checker import Verdict, estimate, exit_code_for, single_start_estimate
from kinetome.library.checker.stats import clopper_pearson, lower_bound, upper_bound

C, B, U = Verdict.COMPOSES, Verdict.BREAKS, Verdict.UNSURE


@pytest.mark.parametrize(
    "k, n, require, expected",
    [
        (200, 200, 0.95, C),  # one-sided low = 0.05^(1/200) = 0.9851 >= 0.95
        (59, 59, 0.95, C),  # 59 clean episodes clear 0.95 one-sided: 0.05^(1/59) = 0.95050
        (58, 58, 0.95, U),  # 0.05^(1/58) = 0.94966 < 0.95
        (0, 200, 0.95, B),
        (140, 200, 0.95, B),  # high = 0.755
        (190, 200, 0.95, U),  # bounds 0.917 and 0.973 straddle 0.95
        (990, 1000, 0.95, C),
        (5, 10, 0.5, U),
        (0, 0, 0.95, U),  # nothing observed
        (1, 3, 0.99, B),
    ],
)
def test_verdict_from_counts_one_sided(k, n, require, expected):
    est = estimate(k, n, require=require, confidence=0.95)
    assert est.verdict is expected
    # Each bound is one-sided at 95%, i.e. one end of the two-sided 90% Clopper-Pearson interval.
    if n:
        low, high = clopper_pearson(k, n, 0.90)
        assert est.low == pytest.approx(low, abs=1e-12) and est.high == pytest.approx(high, abs=1e-12)
    if expected is U and n:
        assert est.more_episodes is None or est.more_episodes > 0
    else:
        assert est.more_episodes is None


def test_upper_bound_uses_its_own_confidence():
    # Bonferroni across 3 handoffs: breaks needs the upper bound at 1 - 0.05/3.
    loose = estimate(180, 200, require=0.95, confidence=0.95)
    strict = estimate(180, 200, require=0.95, confidence=0.95, upper_confidence=1 - 0.05 / 3)
    assert strict.high > loose.high
    assert strict.high_confidence == pytest.approx(1 - 0.05 / 3)
    edge = estimate(184, 200, require=0.95, confidence=0.95)  # high 0.948 at 95%
    edge_corrected = estimate(184, 200, require=0.95, confidence=0.95, upper_confidence=1 - 0.05 / 3)  # 0.956
    assert edge.verdict is B and edge_corrected.verdict is U


def test_lower_bound_from_prefix_counts():
    # 60 of 60 runs of A handed over, but only 60 of 100 episodes got that far: the claim
    # rests on 60/100 through this handoff, far below 0.95.
    est = estimate(60, 60, require=0.95, confidence=0.95, low_from=(60, 100))
    assert est.verdict is U and est.low < 0.7 and est.low_from == (60, 100)
    assert estimate(60, 60, require=0.95, confidence=0.95).verdict is C


def test_unsure_says_how_many_more_episodes_decide():
    est = estimate(95, 100, require=0.9, confidence=0.95)  # low 0.9 one-sided: 0.898
    assert est.verdict is U
    assert est.more_episodes is not None and est.more_episodes > 0
    m = est.n + est.more_episodes
    # At the observed rate 0.95 with m episodes the one-sided lower bound clears 0.9.
    assert lower_bound(0.95 * m, m, 0.95) >= 0.9
    assert lower_bound(0.95 * (m - 1), m - 1, 0.95) < 0.9


def test_single_start_claims_no_bound():
    est = single_start_estimate(True, require=0.95, confidence=0.95, upper_confidence=0.98)
    assert est.verdict is C and est.single_start and est.n == 1
    assert single_start_estimate(False, require=0.95, confidence=0.95, upper_confidence=0.98).verdict is B


@pytest.mark.parametrize(
    "verdicts, code",
    [
        ([C], 0),
        ([C, C, C], 0),
        ([C, B], 1),
        ([C, U], 3),
        ([U, B, C], 1),  # a break outranks unsure
        ([U, U], 3),
    ],
)
def test_exit_codes(verdicts, code):
    assert exit_code_for(verdicts) == code


def test_estimate_rejects_bad_require():
    with pytest.raises(ValueError, match=r"require must be in \(0, 1\), got 1.5"):
        estimate(1, 2, require=1.5, confidence=0.95)


def test_method_table_order_and_errors():
    from kinetome.library.checker import CheckOptions, checker_method, get_method, method_names
    from kinetome.library.errors import InvalidInputError

    assert method_names() == ["static", "model", "sim"]  # cheapest first
    with pytest.raises(ValueError, match="checker method 'static' is already registered"):
        checker_method("static", cost=1)(lambda ctx, js: {})
    with pytest.raises(InvalidInputError, match="method must be one of auto, static, model, sim, got 'simm'; did you mean 'sim'"):
        get_method("simm")
    with pytest.raises(InvalidInputError, match="method: must be one of auto, static, model, sim, got 'z3'"):
        CheckOptions(method="z3")
    with pytest.raises(InvalidInputError, match="workers: must be a whole number >= 1, got 0"):
        CheckOptions(workers=0)
    with pytest.raises(InvalidInputError, match="threads: applies to a run in this process, got 2 with worker processes"):
        CheckOptions(workers=2, threads=2)
    with pytest.raises(InvalidInputError, match="address: must be a Ray cluster address"):
        CheckOptions(address="")
    assert CheckOptions(threads=2).threads == 2 and CheckOptions(workers=3).workers == 3


# The rule at its equality boundary (library/checker/README.md, "Statistics"): composes when the
# one-sided lower bound *reaches* require.handoff (lower >= require), breaks when the upper bound
# is *below* it (upper < require). So a lower bound exactly equal to the requirement composes, and
# an upper bound exactly equal to it does not break. The requirements below are the bounds'
# own float values, so the comparison is exactly at equality; one ulp either side flips it.
@pytest.mark.parametrize("k, n", [(59, 59), (190, 200), (97, 100)])
def test_lower_bound_exactly_at_the_requirement_composes(k, n):
    low = lower_bound(k, n, 0.95)
    assert estimate(k, n, require=low, confidence=0.95).verdict is C  # low == require: composes
    above = math.nextafter(low, 1.0)
    assert estimate(k, n, require=above, confidence=0.95).verdict is not C  # one ulp above: not yet
    if k == n:
        # Closed form for k = n: the bound is the alpha quantile of Beta(n, 1), whose CDF is x^n,
        # so it is (1 - confidence)^(1/n); equal to the beta quantile up to rounding.
        assert low == pytest.approx(0.05 ** (1 / n), rel=1e-12)


@pytest.mark.parametrize("k, n", [(0, 59), (140, 200), (90, 100)])
def test_upper_bound_exactly_at_the_requirement_does_not_break(k, n):
    high = upper_bound(k, n, 0.95)
    assert estimate(k, n, require=high, confidence=0.95).verdict is not B  # high == require: not below
    below_req = math.nextafter(high, 1.0)
    assert estimate(k, n, require=below_req, confidence=0.95).verdict is B  # one ulp more and high < require
    if k == 0:
        assert high == pytest.approx(1 - 0.05 ** (1 / n), rel=1e-12)  # k = 0: Beta(1, n) quantile, 1 - alpha^(1/n)

"""Verdict rule from counts (composes / breaks / unsure) and the exit code of a whole check."""

from __future__ import annotations

import pytest

from kinetome.library.checker import Verdict, estimate, exit_code_for
from kinetome.library.checker.stats import clopper_pearson

C, B, U = Verdict.COMPOSES, Verdict.BREAKS, Verdict.UNSURE


@pytest.mark.parametrize(
    "k, n, require, expected",
    [
        (200, 200, 0.95, C),  # low = 0.025^(1/200) = 0.9817 >= 0.95
        (72, 72, 0.95, C),  # 72 clean episodes just clear 0.95 two-sided: 0.025^(1/72) = 0.95005
        (71, 71, 0.95, U),  # 0.025^(1/71) = 0.9494 < 0.95
        (59, 59, 0.95, U),  # enough one-sided, not for the two-sided interval the verdict uses
        (0, 200, 0.95, B),
        (140, 200, 0.95, B),  # high = 0.762
        (190, 200, 0.95, U),  # interval [0.910, 0.976] straddles 0.95
        (990, 1000, 0.95, C),
        (5, 10, 0.5, U),
        (0, 0, 0.95, U),  # nothing observed
        (1, 3, 0.99, B),
    ],
)
def test_verdict_from_counts(k, n, require, expected):
    est = estimate(k, n, require=require, confidence=0.95)
    assert est.verdict is expected
    low, high = clopper_pearson(k, n, 0.95)
    assert (est.low, est.high) == (low, high)
    if expected is U and n:
        assert est.more_episodes is None or est.more_episodes > 0
    else:
        assert est.more_episodes is None


def test_unsure_says_how_many_more_episodes_decide():
    est = estimate(95, 100, require=0.9, confidence=0.95)  # interval [0.887, 0.984]
    assert est.verdict is U
    assert est.more_episodes is not None and est.more_episodes > 0
    m = est.n + est.more_episodes
    # At the observed rate 0.95 with m episodes the lower end clears 0.9.
    assert clopper_pearson(0.95 * m, m, 0.95)[0] >= 0.9


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

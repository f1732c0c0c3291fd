"""Marks and corrections of sweep cells against outside references.

References: Clopper-Pearson intervals and exact binomial p-values from
``scipy.stats.binomtest`` (Clopper and Pearson 1934); Holm's step-down procedure (Holm
1979, Scand. J. Statist. 6:65-70) computed by hand on the p-values below, and the
Bonferroni level alpha/m.
"""

from __future__ import annotations

import pytest
from scipy.stats import binomtest

from kinetome.library.sweep.region import mark_cells, one_sided_p_value, same_task

COUNTS = [(100, 100), (98, 100), (95, 100), (60, 100), (0, 100), (30, 30)]


@pytest.mark.parametrize("k,n", COUNTS)
def test_p_value_and_interval_match_scipy(k: int, n: int) -> None:
    # scipy's exact one-sided binomial test of H0: p <= 0.9 against p > 0.9
    assert one_sided_p_value(k, n, 0.9) == pytest.approx(binomtest(k, n, 0.9, alternative="greater").pvalue, rel=1e-9, abs=1e-15)
    marks = mark_cells([(k, n)], require=0.9, confidence=0.95, correction="bonferroni")
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="exact")
    assert marks[0].interval == pytest.approx((ci.low, ci.high), abs=1e-9)


def test_bonferroni_lower_bound_is_the_one_sided_exact_bound_at_alpha_over_m() -> None:
    m = len(COUNTS)
    marks = mark_cells(COUNTS, require=0.9, confidence=0.95, correction="bonferroni")
    for (k, n), mark in zip(COUNTS, marks):
        # one-sided lower bound at 1 - alpha/m = lower end of the two-sided interval at 1 - 2 alpha/m
        ref = binomtest(k, n).proportion_ci(confidence_level=1 - 2 * 0.05 / m, method="exact").low
        assert mark.corrected_lower == pytest.approx(ref, abs=1e-9)
        assert mark.level == pytest.approx(0.05 / m)
        assert (mark.mark == "pass") == (ref >= 0.9)


def test_holm_by_hand() -> None:
    """require 0.9, alpha 0.05, four cells. By hand, with p = P(X >= k | Bin(n, 0.9)) from scipy:
    p(60/60) = 0.9**60 = 0.00180, p(45/45) = 0.9**45 = 0.00873, p(58/60) = 0.0435..., p(50/60) = 0.96...
    Sorted: 60/60 at 0.05/4 = 0.0125 -> reject; 45/45 at 0.05/3 = 0.0167 -> reject;
    58/60 at 0.05/2 = 0.025 -> keep (0.0435 > 0.025), so 50/60 is kept too.
    Bonferroni (0.05/4 = 0.0125 each) passes 60/60 and 45/45 as well; 58/60 fails there too."""
    counts = [(50, 60), (45, 45), (60, 60), (58, 60)]
    p = [binomtest(k, n, 0.9, alternative="greater").pvalue for k, n in counts]
    assert p[2] == pytest.approx(0.9**60) and p[1] == pytest.approx(0.9**45)
    assert p[2] < 0.05 / 4 and p[1] < 0.05 / 3 and p[3] > 0.05 / 2
    holm = mark_cells(counts, require=0.9, confidence=0.95, correction="holm")
    assert [m.mark == "pass" for m in holm] == [False, True, True, False]
    assert [m.level for m in holm] == pytest.approx([0.05 / 1, 0.05 / 3, 0.05 / 4, 0.05 / 2])


def test_holm_passes_a_cell_bonferroni_does_not() -> None:
    """require 0.9, three cells: 45/45 (p = 0.9**45 = 0.0087), 38/38 (p = 0.9**38 = 0.0182), 10/40 (p ~ 1).
    Bonferroni tests each at 0.05/3 = 0.0167: 38/38 stays unsure. Holm tests 45/45 at 0.05/3 (pass), then
    38/38 at 0.05/2 = 0.025 (pass), then 10/40 at 0.05 (kept; its upper bound is far below 0.9: fail)."""
    counts = [(45, 45), (38, 38), (10, 40)]
    bonf = mark_cells(counts, require=0.9, confidence=0.95, correction="bonferroni")
    holm = mark_cells(counts, require=0.9, confidence=0.95, correction="holm")
    assert [m.mark for m in bonf] == ["pass", "unsure", "fail"]
    assert [m.mark for m in holm] == ["pass", "pass", "fail"]


def test_fail_and_unsure_marks() -> None:
    # 0/100 has upper bound 1 - (0.05/2)**(1/100) ~ 0.036 < 0.9: fail; 88/100 neither clears nor is excluded: unsure
    marks = mark_cells([(0, 100), (88, 100)], require=0.9, confidence=0.95, correction="holm")
    assert [m.mark for m in marks] == ["fail", "unsure"]
    ref = binomtest(0, 100).proportion_ci(confidence_level=1 - 2 * 0.05 / 2, method="exact").high
    assert marks[0].corrected_upper == pytest.approx(ref, abs=1e-9)


def test_same_task_compares_values_up_to_round_off() -> None:
    assert same_task({"payload_mass": 0.6, "gravity": [0, 0, -9.81]}, {"payload_mass": 0.6000000000001, "gravity": (0.0, 0.0, -9.81)})
    assert not same_task({"payload_mass": 0.6}, {"payload_mass": 0.61})
    assert not same_task({"payload_mass": 0.6}, {"payload_mass": 0.6, "actuator_gain": 1.0})


def test_holm_cell_after_the_stop_shows_its_bound_as_not_tested() -> None:
    """Two cells of 30/30 against 0.9: each p-value is 0.9**30 = 0.042 (> 0.05/2, < 0.05). Holm tests the
    first at 0.025 (fails) and stops, so the second is never tested although its bound at 0.05 clears 0.9;
    the table must not show a bound above the requirement beside 'unsure' without saying why."""
    from kinetome.library.sweep.text import lower_text

    first, second = (m.to_dict() for m in mark_cells([(30, 30), (30, 30)], require=0.9, confidence=0.95, correction="holm"))
    assert first["mark"] == second["mark"] == "unsure"
    assert first["corrected_lower"] < 0.9 <= second["corrected_lower"]
    assert lower_text(first, 0.9) == f"{first['corrected_lower']:.3f}"
    assert "not tested" in lower_text(second, 0.9)
    passed = mark_cells([(100, 100)], require=0.9, confidence=0.95, correction="holm")[0].to_dict()
    assert passed["mark"] == "pass" and "not tested" not in lower_text(passed, 0.9)

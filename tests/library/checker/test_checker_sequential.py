"""How many episodes a check runs and when it may stop: the error at the stop over seeded repetitions.

The kernel is exercised with Bernoulli episodes (a one-handoff chain whose handoff succeeds with
probability p), so thousands of repetitions take seconds; test_checker_coverage.py does the same
through MuJoCo. Tolerances: with R repetitions an error rate near 0.05 has standard error
sqrt(0.05 * 0.95 / R); 2,000 repetitions give 0.0049, and the bounds below allow two of them.
"""

from __future__ import annotations

import numpy as np
import pytest
from checker_testkit import CONFIGS, write_chain

from kinetome.library.checker import Trials, Verdict, auto_plan, check_chain, fixed_plan, run_plan
from kinetome.library.checker.stats import episodes_for_zero_failures, lower_bound

REPS = 2000
ALPHA = 0.05


def bernoulli_blocks(p: float, seed: int, *, identical: bool = False):
    """run_block(first, stop) for a chain entry -> A -> B whose handoff succeeds with probability p."""

    def run_block(first: int, stop: int) -> Trials:
        n = stop - first
        ok = np.random.default_rng([seed, first]).random(n) < p
        handed = np.stack([np.ones(n, dtype=bool), ok], axis=1)
        sig = tuple(b"same" if identical else np.int64([seed, i]).tobytes() for i in range(first, stop))
        return Trials(np.ones((n, 2), dtype=bool), handed, ok.copy(), sig)

    return run_block


def _run(plan, p, seed, **kw):
    return run_plan(plan, bernoulli_blocks(p, seed, **kw), require_handoff=0.95, require_chain=0.95, confidence=0.95)


def test_auto_plan_stages_and_alpha_spending():
    plan = auto_plan(200, require=0.95, confidence=0.95, block_size=10)
    one, two = plan.stages
    assert one.episodes == 59 == episodes_for_zero_failures(0.95, 0.95)  # 0.95^59 = 0.0485 <= 0.05 < 0.95^58
    assert [b - a for a, b in one.blocks] == [10, 10, 10, 10, 10, 9]
    assert two.blocks[0][0] == 59 and two.episodes == 141
    spent = 0.95**59
    assert 1 - two.composes_confidence == pytest.approx((ALPHA - spent) / (1 - spent))
    # A budget within the zero-failure stage leaves one fixed stage at the full confidence.
    small = auto_plan(40, require=0.95, confidence=0.95)
    assert len(small.stages) == 1 and small.stages[0].composes_confidence == 0.95


@pytest.mark.parametrize("plan", [auto_plan(200, require=0.95, confidence=0.95, block_size=10), fixed_plan(200, confidence=0.95, block_size=10)], ids=["auto", "fixed"])
def test_false_composes_at_the_stop_stays_below_alpha(plan):
    # True rate just below the requirement: every composes is wrong. Peeking after every block.
    wrong = sum(_run(plan, 0.949, s).decision.all_handoffs[1].verdict is Verdict.COMPOSES for s in range(REPS))
    assert wrong / REPS <= ALPHA + 0.01, wrong / REPS


def test_false_breaks_at_the_stop_stays_below_alpha():
    plan = auto_plan(200, require=0.95, confidence=0.95, block_size=10)
    wrong = sum(_run(plan, 0.951, s).decision.all_handoffs[1].verdict is Verdict.BREAKS for s in range(REPS))
    assert wrong / REPS <= ALPHA + 0.01, wrong / REPS


def test_naive_peeking_would_not_keep_alpha():
    """The same episodes with an exact lower bound recomputed after every block and a stop at the
    first one that clears 0.95: the power of the test above to catch a rule that is not valid
    under optional stopping (about 9% wrong at p = 0.949)."""
    wrong = 0
    for s in range(REPS):
        run_block, k, n = bernoulli_blocks(0.949, s), 0, 0
        for a in range(0, 200, 10):
            k, n = k + int(run_block(a, a + 10).chain.sum()), n + 10
            if lower_bound(k, n, 0.95) >= 0.95:
                wrong += 1
                break
    assert wrong / REPS > ALPHA + 0.02, wrong / REPS


def test_clean_chain_stops_after_the_zero_failure_stage():
    run = _run(auto_plan(200, require=0.95, confidence=0.95, block_size=10), 1.0, 0)
    assert run.run == {"zero-failure": 59} and run.trials.n == 59
    assert run.decision.all_handoffs[1].verdict is Verdict.COMPOSES and run.decision.chain.verdict is Verdict.COMPOSES
    assert run.decision.all_handoffs[1].low == pytest.approx(0.05 ** (1 / 59))


def test_failing_chain_curtails_stage_one_at_the_first_block():
    run = _run(auto_plan(200, require=0.95, confidence=0.95, block_size=10), 0.0, 0)
    assert run.curtailed and run.run == {"zero-failure": 10, "second": 141}
    assert run.decision.all_handoffs[1].verdict is Verdict.BREAKS and run.decided_in["1"] == "second"


def test_identical_episodes_are_one_trial():
    run = _run(fixed_plan(200, confidence=0.95), 1.0, 0, identical=True)
    d = run.decision
    assert d.episodes == 200 and d.distinct == 1 and d.single_start
    assert d.all_handoffs[1].n == 1 and d.all_handoffs[1].single_start and d.all_handoffs[1].verdict is Verdict.COMPOSES


def test_results_do_not_depend_on_the_thread_count(tmp_path):
    # worker processes: tests/execution/test_spread_commands.py
    skills = [str(CONFIGS / "skills" / "arm-reach-tray.yaml"), str(CONFIGS / "skills" / "arm-place.yaml")]
    path = write_chain(tmp_path, "workers", skills, start=CONFIGS / "initial_states" / "arm_home_wide.yaml", episodes=40,
                       disturbances={"exploration": True, "gain_spread": 0.1})
    one = check_chain(path, method="sim", threads=1, block_size=16).to_dict()
    two = check_chain(path, method="sim", threads=2, block_size=16).to_dict()
    for d in (one, two):
        d.pop("timings_s")
    assert one == two

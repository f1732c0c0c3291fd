"""Stored check results prune the search: a handoff a stored check on this task found broken is not tried."""

from __future__ import annotations

from pathlib import Path

from kinetome.library.api import open_store, register
from kinetome.library.evidence import store_result
from kinetome.library.planning import BROKEN, SearchSettings, search_chains
from kinetome.library.planning.library_problem import CHECK_RESULT_KIND, PlanTask, build_problem

ROOT = Path(__file__).resolve().parents[3]
SKILLS = ROOT / "configs" / "skills"
GOAL = "norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.02"


def _result(verdict: str) -> dict:
    return {"handoffs": [{"index": 0, "kind": "entry", "verdict": "composes"}, {"index": 1, "kind": "handoff", "verdict": verdict}]}


def test_a_stored_break_on_this_task_prunes_the_handoff_and_other_tasks_do_not(tmp_path):
    store = open_store(tmp_path / "store")
    for name in ("arm-lift", "arm-reach-tray", "arm-place"):
        register(SKILLS / f"{name}.yaml", store=store)
    task = PlanTask(env="kinetome/BenchArm-v0", goal=GOAL, initial_states=(ROOT / "configs/initial_states/arm_home.yaml").resolve())
    lp = build_problem(store, task, particles=20)
    pair = ("arm-reach-tray@1", "arm-place@1")
    assert lp.problem.link(*pair).status != BROKEN
    other = {**lp.task_key, "variant": "heavy_payload", "variant_digest": "0" * 64}
    store_result(store, CHECK_RESULT_KIND, list(pair), task=other, settings={}, result=_result("breaks"))
    store_result(store, CHECK_RESULT_KIND, list(pair), task=lp.task_key, settings={"n": 1}, result=_result("composes"))
    assert build_problem(store, task, particles=20).problem.link(*pair).status != BROKEN
    art = store_result(store, CHECK_RESULT_KIND, list(pair), task=lp.task_key, settings={"n": 2}, result=_result("breaks"))
    lp = build_problem(store, task, particles=20)
    fact = lp.problem.link(*pair)
    assert fact.status == BROKEN and art.ref in fact.reason
    # with the only handoff into arm-place ruled out, no chain reaches the settled goal
    found = search_chains(lp.problem, SearchSettings(max_length=3, top=1))
    assert found.candidates == () and found.pruned >= 1

"""Contract gaps (a realised solver state A's execution never reaches), --fail-on-gaps, and what the
next skill feels at the handoff (declared limits, command jump, --fail-on-limits)."""

from __future__ import annotations

import numpy as np
import pytest
from checker_testkit import ARM, CONFIGS, stub_context, stub_skill, write_arm_spec, write_chain

from kinetome.envs import make_rig
from kinetome.library.checker import Counterexample, Evidence, Handoff, Verdict, check_chain
from kinetome.library.checker.combine import combine_handoff

HOME = CONFIGS / "initial_states" / "arm_home.yaml"
SKILLS = CONFIGS / "skills"


@pytest.fixture(scope="module")
def walker_store(tmp_path_factory):
    from kinetome.library.api import register
    from kinetome.library.store import Store

    s = Store(tmp_path_factory.mktemp("walker-store"))
    for name in ("walker-stand", "walker-walk", "walker-halt"):
        register(SKILLS / f"{name}.yaml", store=s)
    return s


def test_unreached_solver_state_is_a_gap_not_a_break(walker_store):
    chain = CONFIGS / "chains" / "walker-stand-walk-halt.yaml"
    sim = check_chain(chain, store=walker_store, method="sim", episodes=1000)
    walk_halt = sim.handoffs[1]
    assert walk_halt.estimate.k >= 0.99 * walk_halt.estimate.n and walk_halt.estimate.n == 1000
    assert walk_halt.verdict is Verdict.COMPOSES and sim.exit_code == 0
    for result in (check_chain(chain, store=walker_store, episodes=1000), check_chain(chain, store=walker_store, method="static")):
        h = result.handoffs[1]
        assert h.verdict is not Verdict.BREAKS
        assert h.gaps, "the gap must be reported"
        gap = h.gaps[0]
        assert gap["clause"] == "abs(torso_pitch) < 0.3" and gap["reached"] is (False if result.method == "auto" else None)
        assert "torso_pitch" in gap["state"] and "abs(torso_pitch) = " in gap["violation"]
        assert "tighten walker-walk@1's stops_when" in gap["fix"] and "loosen walker-halt@1's starts_when" in gap["fix"]
        assert any(n.startswith("contract gap") for n in h.notes)
        assert result.to_dict()["handoffs"][2]["contract_gaps"][0]["clause"] == "abs(torso_pitch) < 0.3"


def test_fail_on_gaps_makes_a_gap_break_the_handoff(walker_store):
    chain = CONFIGS / "chains" / "walker-stand-walk-halt.yaml"
    strict = check_chain(chain, store=walker_store, fail_on_gaps=True)
    h = strict.handoffs[1]
    assert h.verdict is Verdict.BREAKS and h.reason.startswith("contract gap (--fail-on-gaps)") and strict.exit_code == 1
    assert strict.handoffs[0].verdict is Verdict.COMPOSES  # no gap there: the flag changes nothing


def _cex(clause: str, *, confirmed: bool = True, source: str = "z3") -> Counterexample:
    return Counterexample({"qvel": [0.0, 0.4, 0.0]}, (f"{clause}: over",), ({"clause": clause},), source, confirmed, "solver model 1")


def test_a_counterexample_the_execution_reaches_breaks_an_unsure_handoff():
    """The rule in combine.py, both ways, on stand-in evidence: a realised solver state breaks an
    otherwise unsure handoff only when the simulation refused A's stops on the same clause."""
    rig = make_rig(ARM)
    a = stub_skill(rig, "a@1", stops_when="norm(qvel) < 1")
    b = stub_skill(rig, "b@1", starts_when="abs(qvel[1]) <= 0.02 and norm(qvel) < 0.5")
    ctx = stub_context(rig, [a, b])
    j = Handoff(1, "a@1", "b@1")
    static = Evidence("static", Verdict.UNSURE, "containment fails", counterexamples=(_cex("abs(qvel[1]) <= 0.02"),),
                      details={"containment": "counterexample"})
    reached = Evidence("sim", Verdict.UNSURE, "57 of 60", counterexamples=(_cex("abs(qvel[1]) <= 0.02", source="sim"),))
    other = Evidence("sim", Verdict.UNSURE, "57 of 60", counterexamples=(_cex("norm(qvel) < 0.5", source="sim"),))
    yes = combine_handoff(ctx, j, [static, reached])
    assert yes.verdict is Verdict.BREAKS and yes.decided_by == "static" and not yes.gaps
    no = combine_handoff(ctx, j, [static, other])
    assert no.verdict is Verdict.UNSURE and no.gaps and no.gaps[0]["reached"] is False
    composes = Evidence("sim", Verdict.COMPOSES, "60 of 60")
    assert combine_handoff(ctx, j, [static, composes]).verdict is Verdict.COMPOSES


def test_what_the_next_skill_feels_and_fail_on_limits(tmp_path):
    # arm-reach-tray really moves at a few rad/s; declare 0.5 rad/s. B accepts any state.
    fast = write_arm_spec(tmp_path, "reach-declared-slow", starts_when="norm(qvel) < 0.5",
                          stops_when="norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05", limits="{joint_speed: 0.5}")
    anything = write_arm_spec(tmp_path, "anything", starts_when="norm(qvel) < 100", stops_when="norm(qvel) < 100", max_steps=3)
    path = write_chain(tmp_path, "feel", [fast, anything], start=HOME, episodes=60, handoff_limits={"command_jump": 50.0})
    plain = check_chain(path, method="sim")
    h = plain.handoffs[0]
    (limit,) = h.evidence_of("sim").details["limits"]
    assert limit["limit"] == "joint_speed" and limit["exceeded"] and limit["worst"] > 0.5
    jump = h.evidence_of("sim").details["command_jump"]
    assert 0 <= jump["p95"] <= jump["max"] < 50.0 and jump["switches"] == 60
    assert h.verdict is Verdict.COMPOSES and plain.exit_code == 0  # reported, not failed, by default
    assert "joint_speed worst" in plain.format_text() and "(EXCEEDED)" in plain.format_text()
    strict = check_chain(path, method="sim", fail_on_limits=True)
    assert strict.handoffs[0].verdict is Verdict.BREAKS and "joint_speed reached" in strict.handoffs[0].reason
    assert strict.exit_code == 1


def test_command_jump_bound_yes_and_no(tmp_path):
    anything = write_arm_spec(tmp_path, "anything", starts_when="norm(qvel) < 100", stops_when="norm(qvel) < 100", max_steps=3)
    skills = [SKILLS / "arm-reach-tray.yaml", anything]
    tight = write_chain(tmp_path, "tight", skills, start=HOME, episodes=60, handoff_limits={"command_jump": 1e-6})
    loose = write_chain(tmp_path, "loose", skills, start=HOME, episodes=60, handoff_limits={"command_jump": 1e6})
    t = check_chain(tight, method="sim", fail_on_limits=True)
    assert t.handoffs[0].verdict is Verdict.BREAKS and "command jumps by up to" in t.handoffs[0].reason
    assert check_chain(loose, method="sim", fail_on_limits=True).handoffs[0].verdict is Verdict.COMPOSES


def test_a_jump_is_measured_between_last_and_first_command():
    from kinetome.library.checker.sim_method import handoff_feel
    from kinetome.library.runtime.records import SegmentRecord

    def seg(first, last, peaks):
        n = len(first)
        z = np.zeros(n)
        return SegmentRecord("x", {}, {}, np.zeros(n, dtype=np.int8), z, z, z, z, {"joint_speed": np.asarray(peaks)},
                             np.asarray(first, dtype=float), np.asarray(last, dtype=float))

    class Spec:
        limits = type("L", (), {"joint_speed": 1.0, "torque": None, "end_effector_speed": None})()

    a = type("A", (), {"skill": Spec()})()
    a_seg = seg([[0, 0], [0, 0]], [[1.0, 2.0], [0.5, 0.5]], [0.2, 1.5])
    b_seg = seg([[1.0, -1.0], [np.nan, np.nan]], [[0, 0], [0, 0]], [0, 0])
    feel = handoff_feel(a, a_seg, b_seg, np.array([True, True]))
    assert feel["command_jump"] == {"max": 3.0, "p95": 3.0, "switches": 1}  # |(-1) - 2| = 3; episode 2: B never acted
    assert feel["limits"] == [{"limit": "joint_speed", "declared": 1.0, "worst": 1.5, "unit": "rad/s", "exceeded": True, "episodes": 2}]

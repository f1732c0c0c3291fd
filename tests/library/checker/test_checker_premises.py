"""Proofs name their premises: z3's unsat core, enforced vs declared, and declarations checked on
this chain's simulated episodes (issue "Checker verdicts II")."""

from __future__ import annotations

import numpy as np
import pytest
from checker_testkit import ARM, CONFIGS, Limits, stub_context, stub_skill, write_arm_spec, write_chain

from kinetome.envs import make_rig
from kinetome.library.checker import Handoff, Verdict, check_chain
from kinetome.library.checker.envelope import ASSUMED, DECLARED, ENFORCED, Premise
from kinetome.library.checker.premises import check_premises
from kinetome.library.checker.static_method import static_method

HOME = CONFIGS / "initial_states" / "arm_home.yaml"
AT_TARGET = "norm(fingertip - target) < 0.02"


@pytest.fixture(scope="module")
def arm():
    return make_rig(ARM)


def _proof(rig, a, b):
    ctx = stub_context(rig, [a, b])
    ev = static_method(ctx, [Handoff(1, a.ref, b.ref)])[1]
    assert ev.details["containment"] == "proved", ev.reason
    return ev


def test_declared_velocity_limit_contradicted_by_simulation_is_named_and_not_exit_0(tmp_path):
    # A stops at the tray whatever its speed, and declares joint_speed 0.01 rad/s; it really
    # arrives moving. B needs the arm at rest. The proof needs the declaration; the simulation
    # contradicts it.
    a = write_arm_spec(tmp_path, "arrive-fast", starts_when="norm(qvel) < 0.5", stops_when=AT_TARGET, max_steps=150,
                       limits="{joint_speed: 0.01}")
    b = write_arm_spec(tmp_path, "need-rest", starts_when="norm(qvel) < 0.05", stops_when="norm(qvel) < 1", max_steps=5)
    path = write_chain(tmp_path, "declared", [a, b], start=HOME, episodes=60)
    result = check_chain(path)
    assert result.exit_code != 0
    h = result.handoffs[0]
    static = h.evidence_of("static")
    assert static.details["containment"] == "proved"
    assert [p["label"] for p in static.details["premises"]] == ["arrive-fast.yaml declared joint_speed <= 0.01 rad/s on actuated joints"]
    text = result.format_text()
    assert "proof void: arrive-fast.yaml declared joint_speed <= 0.01 rad/s on actuated joints is exceeded" in " ".join(text.split())
    (check,) = h.premise_checks
    assert check.status == "exceeded" and check.kind == DECLARED and check.states > 0


def test_a_declaration_the_simulation_confirms_is_printed_with_its_worst_value(tmp_path):
    # arm-reach-tray declares joint_speed 10 rad/s; the proof into a skill that starts below 20 rad/s
    # uses it, and the simulation never comes close.
    b = write_arm_spec(tmp_path, "any-speed", starts_when="norm(qvel) < 20", stops_when="norm(qvel) < 100", max_steps=2)
    path = write_chain(tmp_path, "confirmed", [CONFIGS / "skills" / "arm-reach-tray.yaml", b], start=HOME, episodes=60)
    result = check_chain(path)
    h = result.handoffs[0]
    checks = {c.label: c for c in h.premise_checks}
    declared = [c for c in checks.values() if c.kind == DECLARED]
    assert declared and all(c.status == "confirmed" for c in declared)
    assert all(c.worst for c in declared)
    assert "confirmed in 59 simulated stop states, worst" in " ".join(result.format_text().split())
    assert result.exit_code == 0


def test_unsat_core_keeps_only_what_the_proof_needs(arm):
    # Joint speeds bound the speed norm: the stop region alone proves it, no premise needed.
    a = stub_skill(arm, "a@1", stops_when="all(abs(qvel) <= 0.2)", limits=Limits(joint_speed=10.0, torque=8.0))
    b = stub_skill(arm, "b@1", starts_when="norm(qvel) < 0.5")
    assert _proof(arm, a, b).details["premises"] == []
    # A joint range closes the gap (qpos[0] <= 2.9 in the arm's MJCF): an enforced premise.
    a2 = stub_skill(arm, "a@1", stops_when="qpos[0] > 0.0")
    b2 = stub_skill(arm, "b@1", starts_when="qpos[0] < 3.0")
    (used,) = _proof(arm, a2, b2).details["premises"]
    assert used["kind"] == ENFORCED and "joint range" in used["label"]
    # The declared end-effector speed proves it alone.
    a3 = stub_skill(arm, "a@1", stops_when="qpos[0] > 0.0", limits=Limits(end_effector_speed=2.0, joint_speed=10.0))
    b3 = stub_skill(arm, "b@1", starts_when="norm(fingertip_vel) <= 2.0")
    assert [p["kind"] for p in _proof(arm, a3, b3).details["premises"]] == [DECLARED]


def test_premise_checks_on_states():
    box = Premise("velocity envelope of qvel", ASSUMED, {"qvel": (np.full(2, -1.0), np.full(2, 1.0))})
    fine = {"qvel": np.array([[0.2, -0.5], [0.9, 0.1]])}
    over = {"qvel": np.array([[0.2, -0.5], [1.7, 0.1]])}
    (ok,) = check_premises([box], fine)
    assert ok.status == "confirmed" and ok.worst == "qvel[0] = 0.9" and ok.states == 2
    (bad,) = check_premises([box], over)
    assert bad.status == "exceeded" and bad.worst == "qvel[0] = 1.7"
    (none,) = check_premises([box], None)
    assert none.status == "unchecked"
    enforced = Premise("joint range of qpos", ENFORCED, {"qpos": (np.zeros(1), np.ones(1))})
    assert check_premises([enforced], None)[0].status == "enforced"


def test_without_simulation_a_proof_that_needs_a_declaration_stays_unchecked(tmp_path):
    a = write_arm_spec(tmp_path, "arrive", starts_when="norm(qvel) < 0.5", stops_when=AT_TARGET, limits="{joint_speed: 0.01}")
    b = write_arm_spec(tmp_path, "rest", starts_when="norm(qvel) < 0.05", stops_when="norm(qvel) < 1", max_steps=5)
    result = check_chain(write_chain(tmp_path, "static-only", [a, b], start=HOME), method="static")
    h = result.handoffs[0]
    assert h.verdict is Verdict.UNSURE and [c.status for c in h.premise_checks] == ["unchecked"]
    assert "not checked: no simulation" in " ".join(result.format_text().split())

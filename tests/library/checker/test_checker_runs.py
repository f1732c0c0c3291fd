"""Whole checks on the bench arm and walker: one-skill chains, repeated skills, a near-boundary handoff
measured against a larger independent simulation, the shipped chains (auto agrees with sim), the report folder."""

from __future__ import annotations

import json

import numpy as np
import pytest
from checker_testkit import CONFIGS, write_arm_spec, write_chain

from kinetome.library.checker import Verdict, check_chain
from kinetome.library.checker.stats import upper_bound

SKILLS = CONFIGS / "skills"
HOME = str(CONFIGS / "initial_states" / "arm_home.yaml")
WIDE = str(CONFIGS / "initial_states" / "arm_home_wide.yaml")


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory):
    from kinetome.library.api import register as register_skill
    from kinetome.library.store import Store

    s = Store(tmp_path_factory.mktemp("demo-store"))
    for spec in sorted(SKILLS.glob("*.yaml")):
        register_skill(spec, store=s)
    return s


def test_one_skill_chain_checks_the_entry_and_the_skill_stopping(tmp_path):
    path = write_chain(tmp_path, "single", [str(SKILLS / "arm-reach-tray.yaml")], start=HOME)
    result = check_chain(path)
    assert result.handoffs == ()
    assert result.entry.verdict is Verdict.COMPOSES
    assert result.entry.decided_by == "static"  # arm_home is a box over raw state: qvel = 0 < 0.5
    # The whole chain (the one skill stopping in time) needs a simulation: auto runs the
    # zero-failure stage, 59 episodes for 0.95 at 95%.
    stats = result.whole_chain
    assert stats is not None and stats.episodes == 59 and stats.success.k == 59
    assert result.chain_verdict is Verdict.COMPOSES and result.exit_code == 0
    assert "no handoff: a chain of one skill" in result.format_text()
    static = check_chain(path, method="static")
    assert static.whole_chain is None and static.chain_verdict is Verdict.UNSURE and static.exit_code == 3


def test_one_skill_chain_from_gaussian_initial_states_is_sampled(tmp_path):
    path = write_chain(tmp_path, "single-wide", [str(SKILLS / "arm-reach-tray.yaml")], start=WIDE)
    result = check_chain(path, start_samples=400, method="static")
    entry = result.entry
    assert entry.decided_by == "sim"  # sampled initial states: MuJoCo forward, no stepping
    assert entry.estimate.n == 400
    # 400 of 400 clean draws: one-sided lower bound 0.05^(1/400) = 0.9925 >= 0.95.
    assert entry.verdict is Verdict.COMPOSES and entry.estimate.k == 400


def test_repeated_skill_a_b_a(tmp_path):
    skills = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml"), str(SKILLS / "arm-reach-tray.yaml")]
    path = write_chain(tmp_path, "there-and-back", skills, start=HOME, episodes=80)
    result = check_chain(path, method="sim")
    labels = [j.label for j in result.all_handoffs]
    assert labels == ["initial states -> arm-reach-tray.yaml", "arm-reach-tray.yaml -> arm-place.yaml", "arm-place.yaml -> arm-reach-tray.yaml"]
    last = result.all_handoffs[2]
    assert last.estimate.n == 80 and result.whole_chain.skills[2].offered == 80
    # 80 clean handoffs: one-sided lower bound 0.05^(1/80) = 0.963 >= 0.95 decides it.
    if last.estimate.k == 80:
        assert last.decided_by == "sim" and last.verdict is Verdict.COMPOSES
    assert len(result.whole_chain.skills) == 3
    # In auto mode the static method cannot link arm-place (fingertip speed) to arm-reach-tray
    # (joint speed) and asks the solver once per distinct pair.
    auto = check_chain(path)
    assert auto.all_handoffs[2].evidence_of("static").details["containment"] == "candidate"


def test_near_boundary_handoff_inside_a_larger_independent_simulation(tmp_path):
    """Check: 150 episodes (seed 11). Reference: 1,500 independent episodes (seed 12) run directly
    with the runtime. The reference rate must lie between the check's one-sided bounds (each
    holds with probability >= 95%; the reference itself has standard error ~0.013)."""
    from kinetome.library.runtime.execute import run_chain
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.runtime.starts import sample_starts
    from kinetome.library.spec_load import load_spec
    from kinetome.library.tasks import load_start_file, task_rig

    # B accepts about 60% of arm-reach-tray's end states from the wide start (joint speed ~0.20-0.26 rad/s).
    b_spec = write_arm_spec(tmp_path, "arm-hold-still", starts_when="norm(qvel) < 0.24", stops_when="norm(qvel) < 0.01", max_steps=20)
    a_spec = SKILLS / "arm-reach-tray.yaml"
    rig = task_rig("kinetome/BenchArm-v0")
    skills = [skill_from_spec(load_spec(p), rig=rig) for p in (a_spec, b_spec)]
    qpos, qvel = sample_starts(rig, load_start_file(WIDE), 1500, seed=12)
    ref = run_chain(skills, rig, starts=(qpos, qvel), seed=12, may_time_out=(False, False))
    stopped = ref.segments[0].reason == 0
    accepted = stopped & (ref.segments[1].reason != 3)
    ran = ref.segments[0].reason != 3
    p_ref = accepted.sum() / ran.sum()
    assert 0.3 < p_ref < 0.9  # near the boundary indeed

    require = float(np.clip(round(p_ref, 2), 0.05, 0.95))
    path = write_chain(tmp_path, "near-boundary", [str(a_spec), str(b_spec)], start=WIDE, episodes=150, seed=11, require=require)
    result = check_chain(path, method="sim")
    h = result.handoffs[0]
    est = h.estimate
    assert est.n == result.whole_chain.skills[0].ran and est.n > 100
    assert est.low <= p_ref <= est.high
    # The upper bound is one-sided at 1 - 0.05/2 (Bonferroni over the entry and this handoff).
    assert est.high == pytest.approx(upper_bound(est.k, est.n, 1 - 0.05 / 2))
    # At 150 episodes a requirement at the true rate cannot be decided; the checker says how many more would.
    assert h.verdict is Verdict.UNSURE and result.exit_code == 3
    text = result.format_text()
    assert "more episodes at the observed rates would decide it" in text or "no number of episodes" in text
    # Refused end states are listed with the failing clause and its margin.
    assert h.counterexamples and "norm(qvel) = " in h.counterexamples[0].violations[0]


def test_demo_chains_agree_with_simulation_in_direction(demo_store):
    """Every shipped chain: auto and --method sim give the same exit code and the same verdict per handoff."""
    for path in sorted((CONFIGS / "chains").glob("*.yaml")):
        auto = check_chain(path, store=demo_store)
        sim = check_chain(path, store=demo_store, method="sim")
        assert auto.exit_code == sim.exit_code, path.name
        assert [h.verdict for h in auto.handoffs] == [h.verdict for h in sim.handoffs], path.name
        assert auto.chain_verdict is sim.chain_verdict, path.name


def test_demo_chain_verdicts(demo_store):
    chains = CONFIGS / "chains"
    # reuse=False: the test above stored these checks; the evidence objects need fresh runs
    composes = check_chain(chains / "arm-lift-reach-place.yaml", store=demo_store, reuse=False)
    assert composes.exit_code == 0
    assert all(h.decided_by == "sim" and h.verdict is Verdict.COMPOSES for h in composes.handoffs)
    assert all(h.evidence_of("static").details["containment"] == "proved" for h in composes.handoffs)
    assert composes.whole_chain.episodes == 59  # the zero-failure stage settled everything

    walker = check_chain(chains / "walker-stand-walk-halt.yaml", store=demo_store, reuse=False)
    walk_halt = walker.handoffs[1]
    # The solver's pitched stop state is realised in MuJoCo but never reached: a contract gap, not a break.
    assert walk_halt.evidence_of("static").details["containment"] == "counterexample"
    assert walk_halt.verdict is Verdict.COMPOSES and any("contract gap" in n for n in walk_halt.notes)

    breaks = check_chain(chains / "arm-place-release.yaml", store=demo_store)  # may be reused: verdicts only
    assert breaks.handoffs[1].decided_by == "sim" and breaks.handoffs[1].verdict is Verdict.BREAKS
    assert breaks.handoffs[0].verdict is Verdict.COMPOSES and breaks.exit_code == 1


def test_methods_one_at_a_time(tmp_path):
    skills = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml")]
    path = write_chain(tmp_path, "two", skills, start=HOME, episodes=80)
    static = check_chain(path, method="static")
    h = static.handoffs[0]
    assert h.verdict is Verdict.UNSURE and h.evidence_of("static").details["containment"] == "proved"
    assert "liveness" in h.reason and static.whole_chain is None and static.exit_code == 3
    model = check_chain(path, method="model")  # no store, no models: nothing can decide the handoff
    assert model.handoffs[0].verdict is Verdict.UNSURE and model.exit_code == 3
    sim = check_chain(path, method="sim")
    assert sim.handoffs[0].decided_by == "sim" and sim.handoffs[0].estimate.n == 80
    assert sim.entry.decided_by == "sim"  # without static, the entry is measured on sampled initial states


def test_structural_mismatch_breaks(tmp_path, demo_store):
    skills = ["arm-place", "arm-release", "walker-halt"]
    path = write_chain(tmp_path, "mixed", skills, start=HOME, episodes=10)
    result = check_chain(path, store=demo_store)
    h = result.handoffs[1]
    assert h.verdict is Verdict.BREAKS and h.decided_by == "static" and h.reason.startswith("structural mismatch")
    assert "robot 'bench_arm'" in h.reason and "robot 'test_walker'" in h.reason
    # The walker's controller cannot run on the arm: no simulation, so place -> release stays open.
    assert any("simulation skipped" in n for n in result.notes)
    assert result.handoffs[0].verdict is Verdict.UNSURE and result.exit_code == 1


def test_result_json_and_report_folder(tmp_path):
    from kinetome.library.report.checker_plots import write_report

    skills = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml"), str(SKILLS / "arm-release.yaml")]
    path = write_chain(tmp_path, "report", skills, start=HOME, episodes=30)
    result = check_chain(path)
    data = json.loads(result.to_json())
    assert data["schema"] == "kinetome.check/1"
    assert data["exit_code"] == result.exit_code
    assert [j["kind"] for j in data["handoffs"]] == ["entry", "handoff", "handoff"]
    assert data["handoffs"][2]["decided_by"] == "sim"
    assert {h["decided_by"] for h in data["handoffs"]} <= {"static", "model", "sim", None}
    assert data["whole_chain"]["episodes"] == 30 and data["chain_verdict"] in ("composes", "breaks", "unsure")
    assert "ISO 12100" in data["caution"]
    written = write_report(result, tmp_path / "report")
    assert {"summary", "json", "timeline"} <= set(written)
    pngs = [p for p in written.values() if p.suffix == ".png"]
    assert len(pngs) >= 2
    for p in pngs:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    summary = (tmp_path / "report" / "summary.txt").read_text()
    assert "Caution: kinetome's results, from simulation and from the solver alike" in " ".join(summary.split())
    assert json.loads((tmp_path / "report" / "result.json").read_text())["chain"]["name"] == "report"


@pytest.mark.slow
def test_readme_walkthrough_after_a_retrain_agrees_with_simulation(tmp_path):
    """README steps 2 and 3: retrain arm-reach-tray for the heavy payload (the README's command),
    then check the shipped chains and one with arm-reach-tray@2 on the nominal arm; auto and sim
    agree in direction, and the @2 chain breaks on its timeouts."""
    from kinetome.library.api import register as register_skill, retrain
    from kinetome.library.store import Store

    demo_store = Store(tmp_path / "store")
    for spec in sorted(SKILLS.glob("*.yaml")):
        register_skill(spec, store=demo_store)
    retrain("arm-reach-tray", store=demo_store, variant=CONFIGS / "variants" / "heavy_payload.yaml",
            start=CONFIGS / "initial_states" / "arm_clearance.yaml", config=CONFIGS / "training" / "arm_heavy_payload.yaml",
            out_dir=tmp_path / "retrain")
    child = tmp_path / "child.yaml"
    child.write_text((CONFIGS / "chains" / "arm-lift-reach-place.yaml").read_text().replace("arm-reach-tray@1", "arm-reach-tray@2")
                     .replace("../initial_states/", str(CONFIGS / "initial_states") + "/"))
    for path in [*sorted((CONFIGS / "chains").glob("arm-*.yaml")), child]:
        auto = check_chain(path, store=demo_store)
        sim = check_chain(path, store=demo_store, method="sim")
        assert auto.exit_code == sim.exit_code and [h.verdict for h in auto.handoffs] == [h.verdict for h in sim.handoffs], path.name
    late = auto.handoffs[1]
    assert late.label == "arm-reach-tray@2 -> arm-place@1" and late.verdict is Verdict.BREAKS
    assert late.evidence_of("sim").details["timed_out"] == late.evidence_of("sim").details["source_ran"] > 0

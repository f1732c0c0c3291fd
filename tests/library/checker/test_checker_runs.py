"""Whole checks on the bench arm and walker: one-skill chains, repeated skills, a near-boundary handoff
measured against a larger independent simulation, the demo chains, and the report folder."""

from __future__ import annotations

import json

import numpy as np
import pytest
from checker_testkit import CONFIGS, write_arm_spec, write_chain

from kinetome.library.checker import Verdict, check_chain
from kinetome.library.checker.stats import clopper_pearson

SKILLS = CONFIGS / "skills"
HOME = str(CONFIGS / "initial_states" / "arm_home.yaml")
WIDE = str(CONFIGS / "initial_states" / "arm_home_wide.yaml")


@pytest.fixture(scope="module")
def demo_store(tmp_path_factory):
    from kinetome.library.api import register_skill
    from kinetome.library.store import Store

    s = Store(tmp_path_factory.mktemp("demo-store"))
    for spec in sorted(SKILLS.glob("*.yaml")):
        register_skill(spec, store=s)
    return s


def test_one_skill_chain_checks_only_the_start(tmp_path):
    path = write_chain(tmp_path, "single", [str(SKILLS / "arm-reach-tray.yaml")], start=HOME)
    result = check_chain(path)
    assert result.handoffs == ()
    assert result.entry.verdict is Verdict.COMPOSES
    assert result.entry.decided_by == "static"  # arm_home is a box over raw state: qvel = 0 < 0.5
    assert result.exit_code == 0
    assert "no handoff: a chain of one skill" in result.format_text()
    assert result.chain_stats is None  # nothing needed a simulation


def test_one_skill_chain_from_a_gaussian_start_is_sampled(tmp_path):
    path = write_chain(tmp_path, "single-wide", [str(SKILLS / "arm-reach-tray.yaml")], start=WIDE)
    result = check_chain(path, start_samples=400)
    entry = result.entry
    assert entry.decided_by == "sample"
    assert entry.estimate.n == 400
    # 400 of 400 clean draws: two-sided lower end 0.025^(1/400) = 0.9908 >= 0.95.
    assert entry.verdict is Verdict.COMPOSES and entry.estimate.k == 400


def test_repeated_skill_a_b_a(tmp_path):
    steps = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml"), str(SKILLS / "arm-reach-tray.yaml")]
    path = write_chain(tmp_path, "there-and-back", steps, start=HOME, episodes=80)
    result = check_chain(path)
    labels = [j.label for j in result.junctions]
    assert labels == ["start -> arm-reach-tray.yaml", "arm-reach-tray.yaml -> arm-place.yaml", "arm-place.yaml -> arm-reach-tray.yaml"]
    assert result.junctions[1].decided_by == "static"
    # arm-place stops on fingertip speed; arm-reach-tray starts on joint speed: the solver cannot
    # link them (relaxed fingertip_vel), so the simulation decides.
    last = result.junctions[2]
    assert last.evidence_of("static").verdict is Verdict.UNSURE and last.evidence_of("static").candidates
    assert last.estimate.n == 80
    # 80 clean handoffs: two-sided lower end 0.025^(1/80) = 0.955 >= 0.95 decides it (72 would be the least).
    if last.estimate.k == 80:
        assert last.decided_by == "sim" and last.verdict is Verdict.COMPOSES
    assert result.chain_stats is not None and len(result.chain_stats.skills) == 3
    assert result.chain_stats.skills[2].offered == 80


def test_near_boundary_handoff_inside_a_larger_independent_simulation(tmp_path):
    """Check: 150 episodes (seed 11). Reference: 1,500 independent episodes (seed 12) run directly
    with the runtime. The reference rate must lie in the check's 95% Clopper-Pearson interval
    (coverage >= 95% by construction; the reference itself has standard error ~0.013)."""
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
    ref = run_chain(skills, rig, starts=(qpos, qvel), seed=12)
    stopped = ref.segments[0].reason == 0
    accepted = stopped & (ref.segments[1].reason != 3)
    p_ref = accepted.sum() / stopped.sum()
    assert 0.3 < p_ref < 0.9  # near the boundary indeed

    require = float(np.clip(round(p_ref, 2), 0.05, 0.95))
    path = write_chain(tmp_path, "near-boundary", [str(a_spec), str(b_spec)], start=WIDE, episodes=150, seed=11, require=require)
    result = check_chain(path, method="sim")
    h = result.handoffs[0]
    est = h.estimate
    assert est.n == int(np.sum(result.chain_stats.skills[0].stopped)) and est.n > 100
    assert est.low <= p_ref <= est.high
    assert (est.low, est.high) == clopper_pearson(est.k, est.n, 0.95)
    # At 150 episodes a requirement at the true rate cannot be decided; the checker says how many more would.
    assert h.verdict is Verdict.UNSURE and result.exit_code == 3
    text = result.format_text()
    assert "more episodes at the observed rate would decide it" in text or "no number of episodes decides it" in text
    # Refused end states are listed with the failing clause and its margin.
    assert h.counterexamples and "norm(qvel) = " in h.counterexamples[0].violations[0]


def test_demo_chains(demo_store):
    chains = CONFIGS / "chains"
    composes = check_chain(chains / "arm-lift-reach-place.yaml", store=demo_store)
    assert composes.exit_code == 0
    assert all(h.decided_by == "static" and h.verdict is Verdict.COMPOSES for h in composes.handoffs)

    breaks = check_chain(chains / "walker-stand-walk-halt.yaml", store=demo_store)
    assert breaks.exit_code == 1
    walk_halt = breaks.handoffs[1]
    assert walk_halt.verdict is Verdict.BREAKS and walk_halt.decided_by == "static"
    cex = [c for c in walk_halt.counterexamples if c.confirmed]
    assert cex and all("torso_pitch" in c.violations[0] for c in cex)

    needs_sim = check_chain(chains / "arm-place-release.yaml", store=demo_store, episodes=60)
    assert needs_sim.handoffs[1].decided_by == "sim"
    assert needs_sim.handoffs[0].decided_by == "static"


def test_methods_one_at_a_time(tmp_path):
    steps = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml")]
    path = write_chain(tmp_path, "two", steps, start=HOME, episodes=80)
    static = check_chain(path, method="static")
    assert static.handoffs[0].verdict is Verdict.COMPOSES and static.chain_stats is None
    model = check_chain(path, method="model")  # no store, no models: nothing can decide the handoff
    assert model.handoffs[0].verdict is Verdict.UNSURE and model.exit_code == 3
    sim = check_chain(path, method="sim")
    assert sim.handoffs[0].decided_by == "sim" and sim.handoffs[0].estimate.n == 80
    assert sim.entry.decided_by == "sample"  # without static, the entry is measured on sampled starts


def test_structural_mismatch_breaks(tmp_path, demo_store):
    steps = ["arm-place", "arm-release", "walker-halt"]
    path = write_chain(tmp_path, "mixed", steps, start=HOME, episodes=10)
    result = check_chain(path, store=demo_store)
    h = result.handoffs[1]
    assert h.verdict is Verdict.BREAKS and h.decided_by == "structural"
    assert "robot 'bench_arm'" in h.reason and "robot 'test_walker'" in h.reason
    # The walker's controller cannot run on the arm: no simulation, so place -> release stays open.
    assert any("simulation skipped" in n for n in result.notes)
    assert result.handoffs[0].verdict is Verdict.UNSURE and result.exit_code == 1


def test_result_json_and_report_folder(tmp_path):
    from kinetome.library.report.checker_plots import write_report

    steps = [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml"), str(SKILLS / "arm-release.yaml")]
    path = write_chain(tmp_path, "report", steps, start=HOME, episodes=30)
    result = check_chain(path)
    data = json.loads(result.to_json())
    assert data["exit_code"] == result.exit_code
    assert [j["kind"] for j in data["junctions"]] == ["entry", "handoff", "handoff"]
    assert data["junctions"][2]["decided_by"] == "sim"
    assert "ISO 12100" in data["caution"]
    written = write_report(result, tmp_path / "report")
    assert {"summary", "json", "timeline"} <= set(written)
    pngs = [p for p in written.values() if p.suffix == ".png"]
    assert len(pngs) >= 2
    for p in pngs:
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    summary = (tmp_path / "report" / "summary.txt").read_text()
    assert "Caution: kinetome's results, from simulation and from the solver alike" in " ".join(summary.split())
    assert json.loads((tmp_path / "report" / "result.json").read_text())["chain"]["chain"] == "report"

"""Option models fitted on a real rig predict a simulated chain (bench arm, two joint-PD skills)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from kinetome.envs import make_rig
from kinetome.library.option_models import OptionModels, predict_chain
from kinetome.library.runtime.execute import run_chain
from kinetome.library.runtime.records import EndReason
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.runtime.starts import sample_starts
from kinetome.library.spec_load import parse_spec_text
from kinetome.library.tasks import load_start_file
from kinetome.trainers.fitting import collect_and_fit, fit_option_models

WIDE_START = Path(__file__).resolve().parents[2] / "configs" / "initial_states" / "arm_home_wide.yaml"

# Lift with a short step cap (about half the turns time out mid-motion) and a reach
# that accepts only slow starts: the chain exercises refusals, timeouts handed over
# to the next skill, and both end-state models.
LIFT = """
name: lift
description: lift the part to the clearance pose, capped at 17 steps
env: kinetome/BenchArm-v0
controller:
  kind: joint_pd
  parameters:
    setpoint: [0.6193, -1.2482, -0.8487]
    kp: [30.0, 20.0, 6.0]
    kd: [3.0, 2.0, 0.3]
starts_when: norm(fingertip - [0.45, 0.0, 0.12]) < 0.05 and norm(qvel) < 0.5
stops_when: norm(fingertip - [0.435, 0.0, 0.273]) < 0.03 and all(abs(qvel) <= 0.2)
max_steps: 17
"""
REACH = """
name: reach
description: carry the part to the tray, starting only when slow
env: kinetome/BenchArm-v0
controller:
  kind: joint_pd
  parameters:
    setpoint: [1.4436, -1.5135, -1.3895]
    kp: [30.0, 20.0, 6.0]
    kd: [3.0, 2.0, 0.3]
starts_when: norm(fingertip_vel) < 0.052
stops_when: norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05
max_steps: 150
"""


@pytest.fixture(scope="module")
def arm():
    rig = make_rig("kinetome/BenchArm-v0")
    lift = skill_from_spec(parse_spec_text(LIFT), rig=rig)
    reach = skill_from_spec(parse_spec_text(REACH), rig=rig)
    return rig, lift, reach, load_start_file(WIDE_START)


def test_chain_prediction_matches_simulation(arm) -> None:
    rig, lift, reach, start = arm
    gamma = 0.99
    qpos, qvel = sample_starts(rig, start, 1200, seed=1)
    train = run_chain([lift, reach], rig, starts=(qpos, qvel), seed=0, gamma=gamma)
    m_lift = fit_option_models(train, 0, envelope=rig.layout, seed=0)
    m_reach = fit_option_models(train, 1, envelope=rig.layout, seed=0)
    assert m_lift.end_state is not None and m_lift.end_state_timed_out is not None
    assert OptionModels.from_files(m_lift.to_files()).to_files() == m_lift.to_files()

    # Fresh starts for the comparison; the chain prediction begins where lift accepts.
    qpos, qvel = sample_starts(rig, start, 600, seed=2)
    test = run_chain([lift, reach], rig, starts=(qpos, qvel), seed=0, gamma=gamma)
    s0, s1 = test.segments
    ran = s0.reason != int(EndReason.REFUSED)
    starts = {k: v[ran] for k, v in s0.start_state.items()}
    accepts = [lambda values: reach.starts_when.evaluate({**reach.parameters, **values})]
    pred = predict_chain([m_lift, m_reach], starts, rng=np.random.default_rng(0), samples=20, accepts=accepts)

    sim_steps = (s0.steps + s1.steps)[ran].astype(float)
    sim_return = (s0.discounted_return + s0.discount * s1.discounted_return)[ran]
    sim_accept = (s1.reason != int(EndReason.REFUSED))[ran]
    sim_success = test.success[ran]
    # The prediction and the simulation use the same starts, so the gap is model error
    # (fit on ~650 turns per skill) plus outcome sampling. Measured over three seed pairs
    # the gaps were <= 3.4% (steps), <= 2.3% (return), <= 0.034 (acceptance, success);
    # the tolerances below are ~1.7x the worst of those (engineering margin, not a bound: common practice).
    assert pred.steps.mean == pytest.approx(sim_steps.mean(), rel=0.06)
    assert pred.discounted_return.mean == pytest.approx(sim_return.mean(), rel=0.04)
    assert pred.handoffs[0].accepted == pytest.approx(sim_accept.mean(), abs=0.06)
    assert pred.success.mean == pytest.approx(sim_success.mean(), abs=0.06)
    assert pred.handoffs[0].after_stop == pytest.approx(np.mean(s0.reason[ran] == int(EndReason.STOPPED)), abs=0.1)
    # both outcomes matter: a real mix of stops and timeouts, accepted and refused handoffs
    assert 0.2 < sim_accept.mean() < 0.8 and 0.2 < pred.handoffs[0].after_stop < 0.8
    # 90% end-state intervals of the ~90 held-out stopped lift turns: mean coverage over
    # the varying components in 85-95% (binomial sd ~0.03 per component; the mean over
    # 18 correlated components varies less).
    assert 0.85 <= m_lift.end_state.errors["coverage_90"]["mean"] <= 0.95


def test_collect_and_fit_runs_the_skill_and_records_the_task(arm) -> None:
    rig, lift, _, start = arm
    models = collect_and_fit(lift, rig, episodes=200, seed=3, start=start, fitted_at="2024-01-01T00:00:00Z")
    assert models.meta.env_id == "kinetome/BenchArm-v0"
    assert models.meta.skill_ref == lift.ref
    assert models.meta.features == ("qpos", "qvel")
    assert "fingertip" in models.meta.end_quantities and "torque" in models.meta.end_quantities
    total = sum(models.meta.outcomes.values())
    assert total == 200 and models.meta.outcomes["refused"] > 0
    # end-state samples stay inside the layout's joint envelope
    low = np.array(rig.layout["qpos"].low) if rig.layout["qpos"].low is not None else None
    if low is not None:
        draws = models.end_state.sample({k: v for k, v in _home(rig).items()}, np.random.default_rng(0), 50)["qpos"]
        assert np.all(draws >= low) and np.all(draws <= np.array(rig.layout["qpos"].high))


def _home(rig) -> dict[str, np.ndarray]:
    from kinetome.library.runtime.starts import named_state_of_states

    qpos, qvel = rig.start(rig.model, np.random.default_rng(0), 4)
    return named_state_of_states(rig, qpos, qvel)

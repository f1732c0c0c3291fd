"""The batched runtime: call-and-return chains, end reasons, and agreement with the plain loop."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from kinetome.envs import make_rig
from kinetome.library.runtime.execute import reference_run_chain, run_chain
from kinetome.library.runtime.records import EndReason
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.runtime.starts import sample_starts
from kinetome.library.spec_load import load_spec

SKILLS = Path(__file__).resolve().parents[3] / "configs" / "skills"


@pytest.fixture(scope="module")
def arm():
    return make_rig("kinetome/BenchArm-v0")


def _skill(name: str, rig, **changes):
    spec = load_spec(SKILLS / f"{name}.yaml")
    if changes:
        spec = replace(spec, **changes)
    return skill_from_spec(spec, rig=rig)


def _assert_same(a, b) -> None:
    for sa, sb in zip(a.segments, b.segments, strict=True):
        np.testing.assert_array_equal(sa.reason, sb.reason)
        np.testing.assert_array_equal(sa.steps, sb.steps)
        np.testing.assert_array_equal(sa.reward, sb.reward)
        np.testing.assert_array_equal(sa.discounted_return, sb.discounted_return)
        for name in sa.end_state:
            np.testing.assert_array_equal(sa.end_state[name], sb.end_state[name], err_msg=name)


@pytest.mark.parametrize("explore", [False, True])
def test_batched_chain_equals_one_env_reference_loop_bit_for_bit(arm, explore) -> None:
    # Reference: the slow one-RigEnv-at-a-time loop (STYLE.md: a fast batched kernel is
    # tested against an obvious loop, as MuJoCo tests its threaded rollout).
    chain = [_skill("arm-lift", arm), _skill("arm-reach-tray", arm), _skill("arm-release", arm)]
    starts = sample_starts(arm, None, 6, seed=4)
    fast = run_chain(chain, arm, starts=starts, seed=11, explore=explore)
    slow = reference_run_chain(chain, arm, starts=starts, seed=11, explore=explore)
    _assert_same(fast, slow)


def test_results_do_not_depend_on_threads(arm) -> None:
    chain = [_skill("arm-lift", arm), _skill("arm-reach-tray", arm)]
    starts = sample_starts(arm, None, 8, seed=1)
    _assert_same(
        run_chain(chain, arm, starts=starts, seed=3, explore=True, workers=1),
        run_chain(chain, arm, starts=starts, seed=3, explore=True, workers=2),
    )


def test_task_space_controller_matches_reference(arm) -> None:
    # task_pd needs the fingertip Jacobian: batched Batch.jac vs mj_jacSite per env.
    from kinetome.library.spec import ControllerSpec

    base = load_spec(SKILLS / "arm-reach-tray.yaml")
    spec = replace(
        base,
        controller=ControllerSpec(kind="task_pd", parameters={"setpoint": [0.3, 0.0, 0.55], "kp": [60, 60, 60], "kd": [6, 6, 6], "joint_damping": [0.5, 0.3, 0.1]}),
        max_steps=40,
    )
    skill = skill_from_spec(spec, rig=arm)
    starts = sample_starts(arm, None, 3, seed=2)
    _assert_same(run_chain([skill], arm, starts=starts, seed=0), reference_run_chain([skill], arm, starts=starts, seed=0))


def test_end_reasons_refused_timed_out_not_reached(arm) -> None:
    lift = _skill("arm-lift", arm)
    release = _skill("arm-release", arm)  # needs the arm at rest at the tray: refuses at home
    starts = sample_starts(arm, None, 4, seed=0)
    out = run_chain([release, lift], arm, starts=starts, seed=0)
    assert out.segments[0].count(EndReason.REFUSED) == 4
    assert out.segments[1].count(EndReason.NOT_REACHED) == 4
    assert not out.success.any()
    never = _skill("arm-lift", arm, stops_when="norm(qvel) > 100", max_steps=7)
    timed = run_chain([never], arm, starts=starts, seed=0)
    assert timed.segments[0].count(EndReason.TIMED_OUT) == 4
    np.testing.assert_array_equal(timed.segments[0].steps, 7)
    np.testing.assert_allclose(timed.segments[0].discount, 0.99**7)


def test_env_termination_is_recorded() -> None:
    walker = make_rig("kinetome/TestWalker-v0")
    limp = skill_from_spec(
        replace(load_spec(SKILLS / "walker-stand.yaml"), stops_when="torso_height > 5", max_steps=200,
                controller=replace(load_spec(SKILLS / "walker-stand.yaml").controller, parameters={"setpoint": [0, 0, 0, 0], "kp": [0, 0, 0, 0], "kd": [0, 0, 0, 0]})),
        rig=walker,
    )
    out = run_chain([limp], walker, starts=sample_starts(walker, None, 3, seed=0), seed=0)
    assert out.segments[0].count(EndReason.TERMINATED) == 3  # unpowered legs fold: the torso falls


def test_chain_starts_each_skill_where_the_previous_ended(arm) -> None:
    chain = [_skill("arm-lift", arm), _skill("arm-reach-tray", arm)]
    out = run_chain(chain, arm, starts=sample_starts(arm, None, 5, seed=9), seed=0)
    for name in ("qpos", "qvel", "fingertip"):
        np.testing.assert_array_equal(out.segments[0].end_state[name], out.segments[1].start_state[name])
    assert out.success.all()
    np.testing.assert_array_equal(out.total_steps, out.segments[0].steps + out.segments[1].steps)


def test_trace_records_frames(arm) -> None:
    out = run_chain([_skill("arm-lift", arm)], arm, starts=sample_starts(arm, None, 3, seed=0), seed=0, trace=2)
    assert out.qpos_trace.shape[0] == 2
    assert out.qpos_trace.shape[1] == out.segments[0].steps[:2].max() + 1

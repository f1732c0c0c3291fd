"""Stochastic episodes (exploration, sensor noise, action delay, gain spread), episode blocks, and
which timeouts let a chain go on."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from test_execute import _assert_same

from kinetome.envs import make_rig
from kinetome.library.runtime.disturbances import Disturbances, DisturbanceStreams
from kinetome.library.runtime.execute import reference_run_chain, run_chain
from kinetome.library.runtime.records import ChainRollout, EndReason
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.runtime.starts import sample_starts
from kinetome.library.spec_load import load_spec

SKILLS = Path(__file__).resolve().parents[3] / "configs" / "skills"
ALL_ON = Disturbances(exploration=True, sensor_noise=0.01, action_delay_steps=2, gain_spread=0.2)


@pytest.fixture(scope="module")
def arm():
    return make_rig("kinetome/BenchArm-v0")


def _skill(name: str, rig, **changes):
    spec = load_spec(SKILLS / f"{name}.yaml")
    return skill_from_spec(replace(spec, **changes) if changes else spec, rig=rig)


def _same(a, b) -> None:
    _assert_same(a, b)
    for sa, sb in zip(a.segments, b.segments, strict=True):
        np.testing.assert_array_equal(sa.first_command, sb.first_command)
        np.testing.assert_array_equal(sa.last_command, sb.last_command)


def test_disturbed_batch_equals_the_one_env_reference_loop_bit_for_bit(arm) -> None:
    chain = [_skill("arm-lift", arm), _skill("arm-reach-tray", arm)]
    starts = sample_starts(arm, None, 4, seed=2)
    kw = dict(starts=starts, seed=5, disturbances=ALL_ON, episode_ids=np.arange(10, 14))
    _same(run_chain(chain, arm, **kw), reference_run_chain(chain, arm, **kw))


def test_blocks_give_the_same_episodes_as_one_batch(arm) -> None:
    chain = [_skill("arm-lift", arm), _skill("arm-reach-tray", arm)]
    qpos, qvel = sample_starts(arm, None, 6, seed=1)
    whole = run_chain(chain, arm, starts=(qpos, qvel), seed=9, disturbances=ALL_ON)
    parts = [
        run_chain(chain, arm, starts=(qpos[a:b], qvel[a:b]), seed=9, disturbances=ALL_ON, episode_ids=np.arange(a, b), workers=w)
        for (a, b), w in (((0, 2), 1), ((2, 6), 2))
    ]
    _same(whole, ChainRollout.concatenate(parts))


def test_disturbances_make_episodes_from_one_initial_state_differ(arm) -> None:
    chain = [_skill("arm-lift", arm)]
    one = sample_starts(arm, None, 1, seed=0)
    starts = (np.repeat(one[0], 5, axis=0), np.repeat(one[1], 5, axis=0))
    calm = run_chain(chain, arm, starts=starts, seed=0)
    assert len({row.tobytes() for row in calm.segments[0].end_state["qpos"]}) == 1
    for d in (Disturbances(exploration=True), Disturbances(sensor_noise=0.02), Disturbances(gain_spread=0.2)):
        noisy = run_chain(chain, arm, starts=starts, seed=0, disturbances=d)
        assert len({row.tobytes() for row in noisy.segments[0].end_state["qpos"]}) == 5, d
    delayed = run_chain(chain, arm, starts=starts, seed=0, disturbances=Disturbances(action_delay_steps=3))
    # A delay is deterministic: the episodes stay identical to each other, but differ from no delay.
    assert len({row.tobytes() for row in delayed.segments[0].end_state["qpos"]}) == 1
    assert not np.array_equal(delayed.segments[0].end_state["qpos"], calm.segments[0].end_state["qpos"])


def test_action_delay_applies_each_command_k_steps_later() -> None:
    streams = DisturbanceStreams(Disturbances(action_delay_steps=2), seed=0, episode_ids=np.arange(2), n_act=1)
    rows = np.arange(2)
    applied = [streams.command(np.array([[float(t)], [10.0 + t]]), rows)[:, 0] for t in range(5)]
    # The first k steps repeat the first command; then step t applies the command of step t - 2.
    assert [a[0] for a in applied] == [0.0, 0.0, 0.0, 1.0, 2.0]
    assert [a[1] for a in applied] == [10.0, 10.0, 10.0, 11.0, 12.0]


def test_gain_spread_draws_one_factor_per_episode_and_actuator() -> None:
    d = Disturbances(gain_spread=0.25)
    a = DisturbanceStreams(d, seed=3, episode_ids=np.arange(200), n_act=3)
    b = DisturbanceStreams(d, seed=3, episode_ids=np.arange(100, 200), n_act=3)
    assert np.all((a.gains >= 0.75) & (a.gains <= 1.25)) and a.gains.std() > 0.1
    np.testing.assert_array_equal(a.gains[100:], b.gains)  # the episode id, not the batch, fixes the draw
    out = a.command(np.ones((2, 3)), np.array([0, 1]))
    np.testing.assert_array_equal(out, a.gains[:2])


def test_sensor_noise_reaches_only_what_the_controller_reads() -> None:
    streams = DisturbanceStreams(Disturbances(sensor_noise=0.1), seed=0, episode_ids=np.arange(3), n_act=1)
    state = {"qpos": np.zeros((3, 2)), "target": np.ones((3, 3))}
    sensed = streams.sense(state, np.arange(3), ("qpos",))
    assert np.all(sensed["qpos"] != 0) and np.abs(sensed["qpos"]).max() < 1.0
    np.testing.assert_array_equal(sensed["target"], state["target"])
    np.testing.assert_array_equal(state["qpos"], 0.0)  # the true state is untouched


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(sensor_noise=-0.1), "sensor_noise must be a number >= 0"),
        (dict(action_delay_steps=-1), "action_delay_steps must be a whole number >= 0"),
        (dict(action_delay_steps=True), "action_delay_steps must be a whole number >= 0"),
        (dict(gain_spread=1.0), "gain_spread must be a number in [0, 1)"),
        (dict(exploration="yes"), "exploration must be true or false"),
    ],
)
def test_bad_disturbances_are_rejected(kwargs, message) -> None:
    with pytest.raises(ValueError, match=message.replace("[", r"\[").replace("(", r"\(").replace(")", r"\)")):
        Disturbances(**kwargs)


def test_a_timeout_ends_the_chain_unless_the_step_may_time_out(arm) -> None:
    short = _skill("arm-reach-tray", arm, max_steps=5)  # cannot reach the tray in 5 steps
    release = _skill("arm-reach-tray", arm)  # starts on norm(qvel) < 0.5: may accept a timed-out state
    starts = sample_starts(arm, None, 4, seed=0)
    strict = run_chain([short, release], arm, starts=starts, seed=0, may_time_out=(False, False))
    assert np.all(strict.segments[0].reason == int(EndReason.TIMED_OUT))
    assert np.all(strict.segments[1].reason == int(EndReason.NOT_REACHED))
    lenient = run_chain([short, release], arm, starts=starts, seed=0, may_time_out=(True, False))
    assert np.all(lenient.segments[1].reason != int(EndReason.NOT_REACHED))
    with pytest.raises(ValueError, match="may_time_out needs one flag per skill"):
        run_chain([short, release], arm, starts=starts, seed=0, may_time_out=(True,))

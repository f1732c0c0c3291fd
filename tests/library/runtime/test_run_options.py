"""Skills run under their chooser: greedy among available skills, refusals, the same option going on, batch independence."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from kinetome.library.predicates import parse_predicate
from kinetome.library.runtime.learned import Chooser, FeatureScaler, LearnedStop, TanhNet, TrainedFeatures
from kinetome.library.runtime.options import EPISODE_ENDS, run_options
from kinetome.library.runtime.starts import sample_starts
from tests.trainers.pointmass import loaded_reach, make_pointmass

N_OBS = 4  # the point mass observes qpos and qvel


@pytest.fixture(scope="module")
def rig():
    return make_pointmass(max_episode_steps=40)


def _features() -> TrainedFeatures:
    return TrainedFeatures(FeatureScaler(np.zeros(N_OBS), np.ones(N_OBS)))


def _chooser(refs, q_values) -> Chooser:
    """A chooser whose Q is the same constant in every state."""
    return Chooser(tuple(refs), TanhNet((np.zeros((len(refs), N_OBS)),), (np.asarray(q_values, dtype=np.float64),)), _features())


def _skills(rig, starts=("norm(qpos) < 5", "norm(qpos) < 5"), stops=("norm(qpos) > 5", "norm(qpos) > 5"), max_steps=15):
    out = []
    names = rig.layout.shapes()
    for i, (start, stop) in enumerate(zip(starts, stops)):
        s = loaded_reach(rig, gain=2.0, max_steps=max_steps, name=f"s{i}")
        out.append(dataclasses.replace(s, starts_when=parse_predicate(start, names), stops_when=parse_predicate(stop, names)))
    return out


def _run(rig, skills, chooser, n=8, seed=2, **kw):
    return run_options(skills, chooser, rig, starts=sample_starts(rig, None, n, seed=seed), seed=seed, **kw)


def test_greedy_choice_timeouts_and_the_episode_limit(rig):
    skills = _skills(rig)
    out = _run(rig, skills, _chooser(["s0", "s1"], [1.0, 3.0]))
    assert np.all(out.turn_skill == 1)  # the higher Q, chosen again after every timeout
    assert np.all(out.steps == 40) and np.all(out.ended == EPISODE_ENDS.index("timed_out"))
    # 40 steps in turns of at most 15: timeouts after 15 and 30, then the limit ends the third turn
    for e in range(8):
        assert out.turn_steps[out.turn_episode == e].tolist() == [15, 15, 10]
    assert not out.turn_stopped.any()
    s = out.summary()
    assert s["skill_share"] == {"s0": 0.0, "s1": 1.0} and s["outcomes"]["timed_out"] == 8


def test_unavailable_skills_are_skipped_and_no_available_skill_is_a_refusal(rig):
    left = _skills(rig, starts=("qpos[0] < 0", "qpos[0] < -5"))
    out = _run(rig, left, _chooser(["s0", "s1"], [1.0, 3.0]), n=16)
    assert np.all(out.turn_skill == 0)  # s1 never available
    began_right = sample_starts(rig, None, 16, seed=2)[0][:, 0] >= 0
    assert began_right.any() and (~began_right).any()
    refused = out.ended == EPISODE_ENDS.index("refused")
    np.testing.assert_array_equal(refused & (out.steps == 0), began_right)  # nothing available at the start
    assert np.all(refused)  # the others are driven right of x = 0, where nothing may start after the timeout


def test_choosing_a_skill_again_after_its_forced_stop_goes_on_with_the_same_turn(rig):
    # stops_when always true: every step is a forced stop, the chooser picks s1 again, the turn goes on
    skills = _skills(rig, stops=("norm(qpos) < 5", "norm(qpos) < 5"), max_steps=100)
    out = _run(rig, skills, _chooser(["s0", "s1"], [0.0, 1.0]))
    assert out.turn_steps.tolist() == [40] * 8 and out.turn_stopped.all()


def test_learned_stops_run_as_declared(rig):
    always = LearnedStop("learned", 0, TanhNet((np.zeros((1, N_OBS)),), (np.array([60.0]),)), _features())
    skills = [dataclasses.replace(s, learned_stop=always) for s in _skills(rig)]
    out = _run(rig, skills, _chooser(["s0", "s1"], [0.0, 1.0]))
    assert np.all(out.turn_steps == 1) and out.turn_stopped.all() and np.all(out.steps == 40)


def test_episodes_do_not_depend_on_the_batch(rig):
    half = LearnedStop("hard", 0, TanhNet((np.zeros((1, N_OBS)),), (np.array([-2.0]),)), _features())
    skills = [dataclasses.replace(s, learned_stop=half) for s in _skills(rig)]
    chooser = _chooser(["s0", "s1"], [0.0, 1.0])
    many, few = _run(rig, skills, chooser, n=8), _run(rig, skills, chooser, n=4)
    np.testing.assert_array_equal(many.returns[:4], few.returns)
    np.testing.assert_array_equal(many.turn_steps[many.turn_episode < 4], few.turn_steps)
    assert len(set(many.turn_steps.tolist())) > 2


def test_skills_must_match_the_chooser(rig):
    skills = _skills(rig)
    with pytest.raises(ValueError, match="skills must be the chooser's"):
        _run(rig, skills[::-1], _chooser(["s0", "s1"], [0.0, 1.0]))

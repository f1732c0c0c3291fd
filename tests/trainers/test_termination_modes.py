"""How beta(s, w) relates to stops_when in each termination mode (one rollout each)."""

import numpy as np
import pytest

from kinetome.library.predicates import parse_predicate
from kinetome.trainers.option_critic import OptionCriticTrainer

from .pointmass import make_pointmass, quick_config, reach_skill


def _stats(mode, stop_text, init_logit, max_steps=60):
    rig = make_pointmass(max_episode_steps=60)
    skills = []
    for name in ("a", "b"):
        s = reach_skill(rig, gain=3.0, max_steps=max_steps)
        s.name, s.starts_when = name, None
        s.stops_when = parse_predicate(stop_text, rig.layout.shapes())
        skills.append(s)
    cfg = quick_config(env_step_budget=16 * 32, stop_mode=mode, stop_init_logit=init_logit)
    trainer = OptionCriticTrainer(skills, rig, cfg, episode_per_skill=False)
    trainer.collector.start()
    trainer.collector.collect()
    return trainer.collector.stats


def test_confined_never_stops_outside_stops_when():
    # beta ~ 1 (logit 20) but stops_when never holds: only timeouts end a skill
    st = _stats("confined", "norm(qpos) > 5", 20.0, max_steps=10)
    assert st.learned_terminations == 0
    assert st.terminations > 0 and all(1 <= d <= 10 for d in st.skill_durations)
    assert max(st.skill_durations) == 10


def test_learned_stops_by_beta_alone():
    st = _stats("learned", "norm(qpos) > 5", 20.0)
    assert st.learned_terminations == st.terminations > 0
    assert np.mean(st.skill_durations) == pytest.approx(1.0)


def test_hard_always_stops_where_stops_when_holds():
    # stops_when always true, beta ~ 0 (logit -20): every step is a forced stop, none learned; choosing the
    # same skill again goes on with the same option, so options end only at switches and timeouts
    st = _stats("hard", "norm(qpos) < 5", -20.0, max_steps=12)
    assert st.learned_terminations == 0
    assert np.mean(st.skill_durations) > 2.0 and max(st.skill_durations) == 12


def test_hard_with_low_beta_runs_until_timeout_outside_stops_when():
    st = _stats("hard", "norm(qpos) > 5", -20.0, max_steps=8)
    assert st.learned_terminations == 0
    assert max(st.skill_durations) == 8


def test_a_learned_stop_needs_a_skill_to_take_over():
    # beta ~ 1 everywhere, but both skills may only start left of x = 0 while driving the mass right, to
    # the goal at x = 0.3: left of 0 every turn ends after one step by a learned stop; once the mass is
    # right of 0 nothing could take over, so the turn runs on to its timeout and the episode is refused.
    rig = make_pointmass(max_episode_steps=60)
    skills = []
    for name in ("a", "b"):
        s = reach_skill(rig, gain=3.0, max_steps=10)
        s.name = name
        s.starts_when = parse_predicate("qpos[0] < 0", rig.layout.shapes())
        s.stops_when = parse_predicate("norm(qpos) > 5", rig.layout.shapes())
        skills.append(s)
    cfg = quick_config(env_step_budget=16 * 32, stop_mode="learned", stop_init_logit=20.0)
    trainer = OptionCriticTrainer(skills, rig, cfg, episode_per_skill=False)
    trainer.collector.start()
    rollout = trainer.collector.collect()
    st = trainer.collector.stats
    assert st.learned_terminations > 0 and st.refusals > 0
    assert max(st.skill_durations) == 10 and 1 in st.skill_durations
    x_next = rollout.inputs["qpos"][1:, :, 0]
    decided = rollout.term_weight[:-1] > 0
    assert np.all(x_next[decided & ~rollout.dones[:-1]] < 0)  # learned decisions only where a skill could start

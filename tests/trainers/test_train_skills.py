"""Options mode: policy over skills, learned terminations and the deliberation cost (Harb et al. 2018, from memory)."""

import numpy as np
import pytest
import torch

from kinetome.trainers.option_critic import OptionCriticTrainer
from kinetome.trainers.train_set import train_skills, train_trainables

from .pointmass import loaded_reach, make_pointmass, quick_config, reach_skill


@pytest.fixture(scope="module")
def rig():
    return make_pointmass(max_episode_steps=60)


def _twin_skills(rig, *, gain=3.0, stop_text=None, max_steps=60):
    """Two reach controllers "a" and "b" that may start anywhere and stop by ``stop_text`` (never when None).

    With the defaults they are equally good: switching gains nothing, so only the deliberation
    cost separates continuing from switching.
    """
    from kinetome.library.predicates import parse_predicate

    skills = []
    for name in ("a", "b"):
        s = reach_skill(rig, gain=gain, max_steps=max_steps)
        s.name, s.starts_when = name, None
        s.stops_when = None if stop_text is None else parse_predicate(stop_text, rig.layout.shapes())
        skills.append(s)
    return skills


def _reward_one(rig):
    """The point mass with reward 1 on every step."""
    import dataclasses

    return dataclasses.replace(rig, reward=lambda before, action, after: (np.ones(len(after["qpos"])), {}))


def _fix_critic(trainer, q):
    """Make the critic's Q(s, w) the constant ``q[w]`` in every state."""
    with torch.no_grad():
        trainer.critic.net[-1].weight.zero_()
        trainer.critic.net[-1].bias.copy_(torch.tensor(q, dtype=torch.float64))


def _duration(rig, eta, seed):
    cfg = quick_config(
        env_step_budget=16 * 32 * 8, stop_mode="learned", stop_init_logit=0.0, stop_lr=0.05,
        deliberation_cost=eta, scale_rewards=False, success_bonus=0.0, seed=seed,
    )
    return train_trainables(_twin_skills(rig), rig, cfg)


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6])
def test_deliberation_cost_makes_skills_run_longer(rig, seed):
    # Seeds 1-8 gave mean skill durations (eval, no action noise) of 1.23-1.48 steps with eta = 0
    # and 1.72-3.14 with eta = 0.05 (initial beta = 0.5, i.e. 2 steps). We require eta > 0 to
    # exceed eta = 0 by at least 0.2 steps on every seed (the smallest measured gap was 0.45).
    plain = _duration(rig, 0.0, seed)
    costly = _duration(rig, 0.05, seed)
    assert costly.mean_skill_duration > plain.mean_skill_duration + 0.2
    assert costly.termination_rate < plain.termination_rate
    assert set(costly.skill_share) == {"a", "b"}
    assert sum(costly.skill_share.values()) == pytest.approx(1.0)


def test_train_skills_on_loaded_skills_returns_refinements(rig):
    a, b = loaded_reach(rig, gain=2.0, name="near"), loaded_reach(rig, gain=0.5, name="slow")
    stored = a.controller.parameter_values()
    cfg = quick_config(env_step_budget=16 * 32 * 3, stop_mode="hard", deliberation_cost=0.01)
    result = train_skills([a, b], rig, cfg, seed=2)
    assert result.skill_refs == ("near", "slow")
    assert set(result.parameters) == {"near", "slow"}
    assert not np.array_equal(result.parameters["near"]["gain"], stored["gain"])
    np.testing.assert_array_equal(a.controller.parameter_values()["gain"], stored["gain"])  # inputs untouched
    assert result.terminations is not None and result.critic[:8] != b""
    assert result.updates == 3 and result.config.seed == 2
    assert np.isfinite(result.mean_skill_duration) and 0.0 <= result.termination_rate <= 1.0
    assert result.metadata()["skills"] == ["near", "slow"]


def test_registered_mode_stops_exactly_at_stops_when(rig):
    # beta = 1 where stops_when holds and 0 elsewhere: every turn ends by a stop, a timeout or the episode's end
    skills = [reach_skill(rig, gain=3.0, max_steps=10), reach_skill(rig, gain=2.0, max_steps=10)]
    skills[1].name = "reach2"
    trainer = OptionCriticTrainer(skills, rig, quick_config(env_step_budget=16 * 32, stop_mode="registered"), episode_per_skill=False)
    assert trainer.heads is None
    trainer.collector.start()
    trainer.collector.collect()
    stats = trainer.collector.stats
    assert stats.learned_terminations == 0
    assert stats.terminations > 0 and max(stats.skill_durations) == 10


def test_a_stop_with_no_skill_available_ends_the_episode_with_a_refusal(rig):
    # Both skills start only outside 0.06 of the goal and stop inside 0.05: after a stop no skill may
    # start, so the episode ends there (refused) instead of running a skill outside its starts_when.
    skills = [reach_skill(rig, gain=3.0), reach_skill(rig, gain=2.0)]
    skills[1].name = "reach2"
    trainer = OptionCriticTrainer(skills, rig, quick_config(env_step_budget=16 * 32, stop_mode="registered"), episode_per_skill=False)
    trainer.collector.start()
    rollout = trainer.collector.collect()
    stats = trainer.collector.stats
    assert stats.refusals > 0 and stats.terminations == 0
    assert len(stats.returns) == stats.refusals  # every episode that ended was refused (no env end, no limit hit)
    assert rollout.dones.sum() == stats.refusals
    # no step ran a skill outside its starts_when: the start of each turn is inside it
    starts = np.linalg.norm(rollout.inputs["qpos"] - np.array([0.3, 0.0]), axis=-1)
    first = np.concatenate([np.ones((1, 16), bool), rollout.dones[:-1]], axis=0)
    assert np.all(starts[first] > 0.06)
    # the same rollout with a skill that may start anywhere: something is always available, nothing refused
    skills[1].starts_when = None
    trainer = OptionCriticTrainer(skills, rig, quick_config(env_step_budget=16 * 32, stop_mode="registered"), episode_per_skill=False)
    trainer.collector.start()
    trainer.collector.collect()
    assert trainer.collector.stats.refusals == 0 and trainer.collector.stats.returns == []  # no episode ended


def test_train_skills_rejects_bad_sets(rig):
    with pytest.raises(ValueError, match="at least one skill"):
        train_skills([], rig, quick_config())
    s = loaded_reach(rig)
    with pytest.raises(ValueError, match="skills must be distinct"):
        train_skills([s, s], rig, quick_config())


@pytest.mark.parametrize("stop_text, expected", [("norm(qpos) < 5", "V"), ("norm(qpos) > 5", "Q")])
def test_truncated_episodes_bootstrap_with_the_value_on_arrival(rig, stop_text, expected):
    # Critic fixed at Q(s, a) = 10, Q(s, b) = -10 and reward 1 per step. At the episode limit the
    # running skill either must stop (stops_when holds, registered mode: beta = 1, so
    # U(s', w) = V(s') = 0.95 * 10 + 0.05 * (10 - 10) / 2 = 9.5) or goes on (beta = 0: U = Q(s', w)).
    flat_reward = _reward_one(rig)
    cfg = quick_config(env_step_budget=16 * 32, stop_mode="registered", scale_rewards=False, max_episode_steps=20,
                       skill_epsilon=0.05, gamma=0.9)
    trainer = OptionCriticTrainer(_twin_skills(flat_reward, gain=1.0, stop_text=stop_text), flat_reward, cfg, episode_per_skill=False)
    _fix_critic(trainer, [10.0, -10.0])
    trainer.collector.start()
    rollout = trainer.collector.collect()
    truncated = rollout.dones  # nothing ends an episode here but the limit
    assert truncated.sum() == 16
    boot = (rollout.rewards[truncated] - 1.0) / 0.9
    if expected == "V":
        np.testing.assert_allclose(boot, 9.5, rtol=0, atol=1e-12)
    else:
        np.testing.assert_allclose(boot, np.where(rollout.skill[truncated] == 0, 10.0, -10.0), rtol=0, atol=1e-12)
    np.testing.assert_array_equal(rollout.rewards[~truncated], 1.0)


def test_choosing_the_same_skill_after_a_forced_stop_goes_on_with_the_same_option(rig):
    # stops_when holds everywhere (a skill whose stop region holds at rest): registered mode forces a stop
    # every step. Choosing the same skill again is not a new option: no switch cost, its clock keeps running.
    flat_reward = _reward_one(rig)
    skills = _twin_skills(flat_reward, gain=1.0, stop_text="norm(qpos) < 5", max_steps=500)
    cfg = quick_config(env_step_budget=16 * 32, stop_mode="registered", scale_rewards=False, max_episode_steps=1000,
                       skill_epsilon=0.3, deliberation_cost=0.5)
    trainer = OptionCriticTrainer(skills, flat_reward, cfg, episode_per_skill=False)
    trainer.collector.start()
    r = trainer.collector.collect()
    changed = r.skill[1:] != r.skill[:-1]
    assert changed.any() and (~changed).any()
    np.testing.assert_array_equal(r.rewards[:-1], np.where(changed, 0.5, 1.0))  # eta only where the skill changed
    dt = rig.dt
    np.testing.assert_allclose(r.skill_time[1:][~changed], r.skill_time[:-1][~changed] + dt)  # the clock runs on
    np.testing.assert_array_equal(r.skill_time[1:][changed], 0.0)
    # durations: runs of one skill, not single steps
    assert np.mean(trainer.collector.stats.skill_durations) > 2.0


def test_stop_advantage_compares_with_the_best_skill_that_could_take_over(rig):
    # Critic fixed at Q(a) = 10, Q(b) = -10: A(s', w) = Q(s', w) - max Q(s', .) is 0 for a and -20 for b. Against
    # the epsilon-greedy value (0.95 * 10 + 0.05 * 0 = 9.5) a would get +0.5 and every greedy skill would be
    # pushed to run on even with no deliberation cost; the choice's exploration is not what a switch is worth.
    cfg = quick_config(env_step_budget=16 * 32, stop_mode="learned", skill_epsilon=0.3)
    trainer = OptionCriticTrainer(_twin_skills(rig, gain=1.0), rig, cfg, episode_per_skill=False)
    _fix_critic(trainer, [10.0, -10.0])
    trainer.collector.start()
    r = trainer.collector.collect()
    assert set(np.unique(r.skill)) == {0, 1}
    np.testing.assert_array_equal(r.term_advantage[r.skill == 0], 0.0)
    np.testing.assert_array_equal(r.term_advantage[r.skill == 1], -20.0)


def test_short_segments_still_measure_every_mean(rig):
    # Regression: the evaluation after training ran two segments only. With 4-step segments and
    # skills that never stop by themselves, two segments (8 steps) end no turn and no episode
    # (episodes last up to 60 steps), so every mean was NaN and storing the result failed
    # ("meta must hold only JSON values"). It now runs on until each env has ended an episode.
    import json
    import math

    cfg = quick_config(env_step_budget=4 * 4 * 2, parallel_envs=4, segment_steps=4, minibatch_size=8,
                       stop_mode="registered", seed=3)
    result = train_trainables(_twin_skills(rig), rig, cfg)
    assert math.isfinite(result.mean_return) and math.isfinite(result.mean_skill_duration)
    assert math.isfinite(result.termination_rate)
    assert result.mean_skill_duration > 8  # turns longer than the two segments the old evaluation ran
    meta = result.metadata()
    json.dumps(meta, allow_nan=False)  # what the store demands
    assert meta["stop_rate"] == result.termination_rate and meta["env_steps"] == 32 and "steps" not in meta


def test_the_termination_step_follows_the_option_critic_update_on_the_arrival_state(rig):
    # Option-critic termination update with a deliberation cost (Bacon, Harb & Precup 2017; Harb et al. 2018,
    # from memory): theta <- theta - alpha * sum_i dbeta(s'_i, w_i)/dtheta * (A(s'_i, w_i) + eta) / n, over the
    # learned decisions only, with s'_i the state after step i, w_i the skill that ran it and A = Q(s', w) - max Q(s', .).
    # For a linear sigmoid head the gradient of row w is sum_i beta_i (1 - beta_i) (A_i + eta) [f(s'_i), 1] / n.
    # A plain gradient step (SGD, lr 1) on the trainer's termination step must move the head by exactly that.
    from kinetome.trainers.update import _samples, _termination_step

    eta = 0.5
    cfg = quick_config(env_step_budget=16 * 32, stop_mode="learned", stop_init_logit=0.3, standardise_observations=False,
                       skill_epsilon=0.3, deliberation_cost=eta)
    trainer = OptionCriticTrainer(_twin_skills(rig, gain=1.0, max_steps=6), rig, cfg, episode_per_skill=False)
    _fix_critic(trainer, [10.0, -10.0])
    with torch.no_grad():  # a head that depends on the state, so the features matter
        trainer.heads.net[-1].weight.copy_(torch.tensor([[0.7, -0.4, 0.2, 0.1], [-0.3, 0.5, 0.0, -0.2]], dtype=torch.float64))
    trainer.collector.start()
    r = trainer.collector.collect()
    # s' is the state after the step: the next row's state where the episode went on
    went_on = ~r.dones[:-1]
    np.testing.assert_array_equal(r.term_features[:-1][went_on], r.features[1:][went_on])
    # forced stops (the 6-step timeout) and episode ends are not learned decisions
    steps_run = np.rint(r.skill_time / rig.dt) + 1
    assert np.all(r.term_weight[steps_run >= 6] == 0) and np.all(r.term_weight[r.dones] == 0)
    assert r.term_weight.sum() > 0 and (r.term_weight == 0).any()
    np.testing.assert_array_equal(r.term_advantage, np.where(r.skill == 0, 0.0, -20.0))

    f = r.term_features.reshape(-1, r.term_features.shape[-1])
    w, m, a = r.skill.reshape(-1), r.term_weight.reshape(-1), r.term_advantage.reshape(-1)
    weight0 = trainer.heads.net[-1].weight.detach().numpy().copy()
    bias0 = trainer.heads.net[-1].bias.detach().numpy().copy()
    beta = 1.0 / (1.0 + np.exp(-(np.sum(f * weight0[w], axis=1) + bias0[w])))
    g = m * beta * (1 - beta) * (a + eta) / m.sum()
    expected_w = np.stack([np.sum((g * (w == k))[:, None] * f, axis=0) for k in range(2)])
    expected_b = np.array([np.sum(g * (w == k)) for k in range(2)])
    assert expected_b[0] > 0 > expected_b[1]  # a is the best skill: eta keeps it running; b is 20 worse: it stops

    s = _samples(r, np.zeros_like(r.rewards), np.zeros_like(r.rewards), with_terminations=True)
    sgd = torch.optim.SGD(trainer.heads.parameters(), lr=1.0)
    _termination_step(trainer.heads, sgd, s, torch.arange(s.size), eta=eta, update_index=1)
    np.testing.assert_allclose(weight0 - trainer.heads.net[-1].weight.detach().numpy(), expected_w, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(bias0 - trainer.heads.net[-1].bias.detach().numpy(), expected_b, rtol=1e-9, atol=1e-12)

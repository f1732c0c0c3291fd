"""Rollout collection for the option actor-critic on batched MuJoCo (``SimBatch``).

N simulations step as one batch; each step makes one controller call per
skill for the simulations running it, one critic call, and batched predicate
checks. Two episode modes:

- ``episode_per_skill`` (flat mode, retraining): one skill; an episode ends
  when its ``stops_when`` holds (success, terminal), the env terminates
  (terminal) or ``max_steps``/the episode limit pass (truncated: bootstrapped);
- options mode: several skills inside one task episode; a skill ends by its
  termination (see ``STOP_MODES``) or timeout, the next is chosen
  epsilon-greedy on Q, and each switch costs ``deliberation_cost``.

One step (``Collector._step``) runs as named phases: act, advance the
physics, test the stops, decide how the step ended (``StepEnd``, per mode),
record statistics, scale rewards and bootstrap truncations, store the
samples, then choose next skills and reset ended episodes.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np
import torch

from kinetome.library.errors import TrainingError

from .config import TrainConfig
from .normaliser import ObservationNormaliser, ReturnNormaliser, RunningMoments
from .samples import EpisodeStats, Rollout, RolloutBuffer, StepEnd
from kinetome.library.runtime.learned import clock_features, phase_angles, stop_rule

from .skill_policy import NO_SKILL, choose_skills, skill_values
from .starts import StartSampler
from .trainable import TrainableSkill

__all__ = ["Rollout", "EpisodeStats", "Collector", "arrival_value"]

_MAX_START_ROUNDS = 100
_Clock = tuple[np.ndarray, np.ndarray, np.ndarray]  # (episode step, running skill, skill step) per row


def _flatten(state: dict[str, np.ndarray], names: Sequence[str], ids: np.ndarray) -> np.ndarray:
    return np.concatenate([state[n][ids].reshape(ids.size, -1) for n in names], axis=1)


def arrival_value(q_w: np.ndarray, v: np.ndarray, stop_probability: np.ndarray) -> np.ndarray:
    """U(s', w) = (1 - beta(s', w)) Q(s', w) + beta(s', w) V(s'): the value of arriving in s' running w.

    The option-value function on arrival (Sutton, Precup & Singh 1999; Bacon, Harb & Precup 2017);
    beta is 1 where the stop is forced (stops_when by the stop mode, or a timeout).
    """
    return (1.0 - stop_probability) * q_w + stop_probability * v


def _take(state: dict[str, np.ndarray], ids: np.ndarray, names: Sequence[str] | None = None) -> dict[str, np.ndarray]:
    keys = state.keys() if names is None else names
    return {k: state[k][ids] for k in keys}


class Collector:
    """Owns the batched simulations and every per-env counter between updates."""

    def __init__(
        self,
        *,
        rig: Any,
        skills: Sequence[TrainableSkill],
        config: TrainConfig,
        sampler: StartSampler,
        episode_per_skill: bool,
        nthread: int,
        critic: torch.nn.Module,
        heads: torch.nn.Module | None,
        obs_norm: ObservationNormaliser,
        ret_norm: ReturnNormaliser,
        np_rng: np.random.Generator,
        torch_gen: torch.Generator,
        explore: bool = True,
    ):
        from kinetome.library.runtime.sim import SimBatch

        if episode_per_skill and len(skills) != 1:
            raise ValueError(f"episode_per_skill needs exactly one skill, got {len(skills)}")
        self.rig, self.skills, self.config = rig, list(skills), config
        self.sampler = sampler
        self.episode_per_skill = episode_per_skill
        self.critic, self.heads = critic, heads
        self.obs_norm, self.ret_norm = obs_norm, ret_norm
        self.np_rng, self.torch_gen = np_rng, torch_gen
        # explore=False: mean actions, greedy skill choice, frozen normalisers (evaluation)
        self.explore = explore
        self.epsilon = config.skill_epsilon if explore else 0.0
        self.n = config.parallel_envs
        self.sim = SimBatch(rig, self.n, nthread=nthread)
        self.extra = tuple(sorted({x for s in self.skills for x in s.needs}))
        self.input_names = tuple(sorted({x for s in self.skills for x in (*s.reads, *s.needs)}))
        self.limit = config.max_episode_steps or int(rig.max_episode_steps)
        self.max_steps = np.array([s.max_steps for s in self.skills])
        self.skill = np.zeros(self.n, dtype=np.int64)
        self.skill_steps = np.zeros(self.n, dtype=np.int64)
        self.episode_steps = np.zeros(self.n, dtype=np.int64)
        self.episode_return = np.zeros(self.n)
        self.state: dict[str, np.ndarray] = {}
        self.stats = EpisodeStats()
        # running statistics of each adapting controller's flattened inputs
        self.input_moments: dict[int, RunningMoments] = {}
        for k, sk in enumerate(self.skills):
            pair = sk.input_normaliser
            if pair is not None:
                self.input_moments[k] = RunningMoments(tuple(pair[0].shape))

    # ----- features and values ------------------------------------------------

    def features(self, state: dict[str, np.ndarray], clock: "_Clock", *, update: bool = False) -> np.ndarray:
        """Critic inputs (B, n_features): the (standardised) observation, then the ``critic_inputs``."""
        obs = np.asarray(self.rig.observe(state), dtype=np.float64)
        if not np.all(np.isfinite(obs)):
            rows = np.flatnonzero(~np.all(np.isfinite(obs), axis=1))
            raise TrainingError(
                f"observation must be finite, got NaN/Inf in simulations {rows[:5].tolist()} of {self.rig.env_id}; "
                "the physics diverged: lower the learning rate or tighten the controller bounds"
            )
        if self.config.standardise_observations:
            if update:
                self.obs_norm.update(obs)
            obs = self.obs_norm(obs)
        if not self.config.critic_inputs:
            return obs
        return np.concatenate([obs, self._clock_features(clock)], axis=1)

    def _clock_features(self, clock: "_Clock") -> np.ndarray:
        episode_step, skill, skill_step = clock
        phase = phase_angles([s.controller for s in self.skills], skill, skill_step * self.rig.dt)
        return clock_features(self.config.critic_inputs, episode_step=episode_step, limit=self._time_limit(skill), phase=phase)

    def _time_limit(self, skill: np.ndarray) -> np.ndarray | int:
        """Steps an episode may last: the episode limit, and in flat mode also the skill's max_steps."""
        if self.episode_per_skill:
            return np.minimum(self.max_steps[skill], self.limit)
        return self.limit

    def _clock(self, ids: np.ndarray | None = None, *, skill: np.ndarray | None = None) -> "_Clock":
        """(episode step, running skill, skill step) of simulations ``ids`` (default all)."""
        ids = slice(None) if ids is None else ids
        return self.episode_steps[ids], (self.skill if skill is None else skill)[ids], self.skill_steps[ids]

    def q_values(self, features: np.ndarray) -> np.ndarray:
        with torch.no_grad():
            return self.critic(torch.from_numpy(features)).numpy()

    def available(self, state: dict[str, np.ndarray]) -> np.ndarray:
        return np.stack([s.starts(state) for s in self.skills], axis=1)

    def _choose(self, state: dict[str, np.ndarray]) -> np.ndarray:
        """The first skill of fresh episodes (their start states lie inside some skill's starts_when)."""
        n = len(next(iter(state.values())))
        if len(self.skills) == 1:
            return np.zeros(n, dtype=np.int64)
        zeros = np.zeros(n, dtype=np.int64)
        q = self.q_values(self.features(state, (zeros, zeros, zeros)))
        return choose_skills(q, self.available(state), epsilon=self.epsilon, rng=self.np_rng)

    # ----- episodes -------------------------------------------------------------

    def start(self) -> None:
        """Reset every simulation to a fresh start (call once before the first rollout)."""
        self.state = self.sim.state(extra=self.extra)
        self._reset(np.arange(self.n))

    def _reset(self, ids: np.ndarray) -> None:
        pending = np.asarray(ids, dtype=np.int64)
        for _ in range(_MAX_START_ROUNDS):
            qpos, qvel = self.sampler.sample(self.np_rng, pending.size)
            self.sim.reset(qpos, qvel, pending)
            fresh = self.sim.state(pending, extra=self.extra)
            ok = self.available(fresh).any(axis=1)
            for k, v in fresh.items():
                self.state[k][pending[ok]] = v[ok]
            pending = pending[~ok]
            if pending.size == 0:
                break
        else:
            names = ", ".join(s.name for s in self.skills)
            raise TrainingError(
                f"start states must satisfy starts_when of {names}, got none of {_MAX_START_ROUNDS} draws accepted "
                f"for {pending.size} simulations; give an initial-states distribution inside starts_when"
            )
        ids = np.asarray(ids, dtype=np.int64)
        self.skill_steps[ids] = 0
        self.episode_steps[ids] = 0
        self.episode_return[ids] = 0.0
        self.skill[ids] = self._choose(_take(self.state, ids))

    # ----- one rollout ----------------------------------------------------------

    def collect(self) -> Rollout:
        """Step every simulation ``rollout_len`` times; return the samples of one update."""
        self.stats = EpisodeStats()
        if self.explore:
            self._apply_input_normalisers()
        shapes = {name: tuple(self.state[name].shape) for name in self.input_names}
        buf = RolloutBuffer(self.config.segment_steps, self.n, self.rig.n_act, shapes)
        for t in range(self.config.segment_steps):
            self._step(t, buf)
        last_values = self.q_values(self.features(self.state, self._clock()))[np.arange(self.n), self.skill]
        scale = self.ret_norm.scale if self.config.scale_rewards else 1.0
        return buf.rollout(last_values, reward_scale=scale)

    def _step(self, t: int, buf: RolloutBuffer) -> None:
        """Act, step the physics, decide how each simulation's step ended, record it, move on."""
        state = self.state
        feats = self.features(state, self._clock(), update=self.explore)
        q = self.q_values(feats)
        w = self.skill.copy()
        skill_time = self.skill_steps * self.rig.dt
        actions, log_prob = self._act(state, w, skill_time)
        after, reward, terminated = self._advance(state, actions)
        self.episode_steps += 1
        self.skill_steps += 1
        self.episode_return += reward
        stops = self._stops(after, w)
        timeout = self.skill_steps >= self.max_steps[w]
        over_limit = self.episode_steps >= self.limit
        if self.episode_per_skill:
            end = self._end_of_episode_per_skill(reward, stops, terminated, timeout, over_limit)
        else:
            end = self._end_of_options_step(after, w, reward, stops, terminated, timeout, over_limit)
        self._record(w, end)
        rewards = self._training_rewards(end, after, w)
        buf.store(t, state=state, end=end, features=feats, skill=w, skill_time=skill_time, actions=actions,
                  log_prob=log_prob, values=q[np.arange(self.n), w], rewards=rewards)
        self.state = after
        self._next_skills(after, end)

    def _act(self, state: dict[str, np.ndarray], w: np.ndarray, skill_time: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Pre-clip actions (N, n_act) and their log-probabilities (N,): one controller call per skill."""
        actions = np.zeros((self.n, self.rig.n_act))
        log_prob = np.zeros(self.n)
        for k, sk in enumerate(self.skills):
            ids = np.flatnonzero(w == k)
            if ids.size == 0:
                continue
            if self.explore and k in self.input_moments:
                self.input_moments[k].update(_flatten(state, sk.reads, ids))
            with torch.no_grad():
                dist = sk.controller.distribution(_take(state, ids, (*sk.reads, *sk.needs)), skill_time[ids])
                if self.explore:
                    eps = torch.randn(dist.loc.shape, generator=self.torch_gen, dtype=torch.float64)
                    a = dist.loc + dist.scale * eps
                else:
                    a = dist.loc
                log_prob[ids] = dist.log_prob(a).sum(-1).numpy()
            actions[ids] = a.numpy()
        if not np.all(np.isfinite(actions)):
            raise TrainingError(
                "controller actions must be finite, got NaN/Inf; a parameter diverged: lower learning_rate or check the controller bounds"
            )
        return actions, log_prob

    def _advance(self, state: dict[str, np.ndarray], actions: np.ndarray) -> tuple[dict[str, np.ndarray], np.ndarray, np.ndarray]:
        """Step the physics: (state after, reward (N,), env ended (N,))."""
        applied = self.sim.step(actions)
        after = self.sim.state(extra=self.extra)
        reward, _ = self.rig.reward(state, applied, after)
        reward = np.asarray(reward, dtype=np.float64)
        if not np.all(np.isfinite(reward)):
            bad = np.flatnonzero(~np.isfinite(reward))
            raise TrainingError(
                f"reward must be finite, got {reward[bad[0]]} in simulations {bad[:5].tolist()} of {self.rig.env_id}; "
                "check the task reward and the variant's physics"
            )
        return after, reward, np.asarray(self.rig.terminated(after), dtype=bool)

    def _stops(self, after: dict[str, np.ndarray], w: np.ndarray) -> np.ndarray:
        """Where the running skill's ``stops_when`` holds after the step, (N,)."""
        stops = np.zeros(self.n, dtype=bool)
        for k, sk in enumerate(self.skills):
            ids = np.flatnonzero(w == k)
            if ids.size and sk.stops_when is not None:
                stops[ids] = sk.stops(_take(after, ids))
        return stops

    def _end_of_episode_per_skill(self, reward, stops, terminated, timeout, over_limit) -> StepEnd:
        """Flat mode: the skill's stop is a success and ends the episode; time limits truncate it."""
        success = stops & ~terminated
        terminal = terminated | success
        truncated = (timeout | over_limit) & ~terminal
        if "time_remaining" in self.config.critic_inputs:  # the time limit is part of the task
            terminal, truncated = terminal | truncated, np.zeros(self.n, dtype=bool)
        zeros = np.zeros(self.n)
        return StepEnd(
            terminal=terminal,
            truncated=truncated,
            skill_ends=terminal | truncated,
            switched=np.zeros(self.n, dtype=bool),
            learned_stop=np.zeros(self.n, dtype=bool),
            reward=reward + self.config.success_bonus * success,
            term_weight=zeros,
            term_advantage=zeros.copy(),
            success=success if self.skills[0].stops_when is not None else None,
        )

    def _end_of_options_step(self, after, w, reward, stops, terminated, timeout, over_limit) -> StepEnd:
        """Options mode: forced and learned stops, the next skill where one stopped, switch cost, termination targets.

        Where a skill stopped and no skill's starts_when holds, the episode ends there with a refusal;
        a learned stop is only possible where some skill could take over.
        Where its stops_when forced a skill to stop and the choice falls on that skill again, the option
        goes on: no switch, no cost, its clock and duration keep running (a timeout or a learned stop
        always ends the option).
        """
        feats_after = self.features(after, self._clock(skill=w))
        q_after = self.q_values(feats_after)
        available = self.available(after)
        forced, learnable = stop_rule(self.config.stop_mode, stops, timeout)
        learnable &= available.any(axis=1)  # a learned stop needs a skill to switch to
        beta, learned_stop = self._learned_stops(feats_after, w, learnable)
        stopped = (forced | learned_stop) & ~(terminated | over_limit)
        next_skill = w.copy()
        sw = np.flatnonzero(stopped)
        if sw.size:
            next_skill[sw] = choose_skills(q_after[sw], available[sw], epsilon=self.epsilon, rng=self.np_rng)
        refused = next_skill == NO_SKILL
        terminal = terminated | refused
        truncated = over_limit & ~terminal
        if "time_remaining" in self.config.critic_inputs:  # the time limit is part of the task
            terminal, truncated = terminal | truncated, np.zeros(self.n, dtype=bool)
        ep_end = terminal | truncated
        # the same skill chosen again after a forced stop by its stops_when is not a new option
        goes_on = stopped & ~timeout & ~learned_stop & (next_skill == w)
        switched = stopped & ~refused & ~goes_on
        v_after = skill_values(q_after, available, epsilon=self.epsilon)
        # the stop decision compares with the best skill that could take over: exploration in the choice
        # (epsilon) is not part of what switching is worth
        v_best = skill_values(q_after, available, epsilon=0.0)
        q_w = q_after[np.arange(self.n), w]
        stop_probability = np.where(forced, 1.0, np.where(learnable, beta, 0.0))
        return StepEnd(
            terminal=terminal,
            truncated=truncated,
            skill_ends=((forced | learned_stop) & ~goes_on) | ep_end,
            switched=switched,
            learned_stop=learned_stop,
            reward=reward - self.config.deliberation_cost * switched,
            term_weight=(learnable & ~ep_end).astype(np.float64),
            term_advantage=q_w - v_best,
            feats_after=feats_after,
            bootstrap=arrival_value(q_w, v_after, stop_probability),
            next_skill=next_skill,
            refused=refused,
        )

    def _learned_stops(self, feats_after: np.ndarray, w: np.ndarray, learnable: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(beta(s', w), stops): sample the stop heads where a stop is a learned decision (one uniform draw per simulation)."""
        if self.heads is None or not learnable.any():
            return np.zeros(self.n), np.zeros(self.n, dtype=bool)
        with torch.no_grad():
            beta = self.heads.beta(torch.from_numpy(feats_after), torch.from_numpy(w)).numpy()
        u = self.np_rng.random(self.n)
        return beta, learnable & (u < beta)

    def _record(self, w: np.ndarray, end: StepEnd) -> None:
        """Fold one step into the rollout's episode statistics."""
        st = self.stats
        ep_end = end.episode_ends
        if end.success is not None:  # a skill that cannot stop has no success rate
            st.successes.extend(end.success[ep_end].tolist())
        st.skill_steps += self.n
        counts = np.bincount(w, minlength=len(self.skills))
        st.skill_counts = counts if st.skill_counts is None else st.skill_counts + counts
        st.skill_durations.extend(self.skill_steps[np.flatnonzero(end.skill_ends)].tolist())
        st.terminations += int(np.sum(end.skill_ends & ~ep_end))
        st.learned_terminations += int(np.sum(end.learned_stop & ~ep_end))
        if end.refused is not None:
            st.refusals += int(np.sum(end.refused))
        done_ids = np.flatnonzero(ep_end)
        st.returns.extend(self.episode_return[done_ids].tolist())
        st.lengths.extend(self.episode_steps[done_ids].tolist())

    def _training_rewards(self, end: StepEnd, after: dict[str, np.ndarray], w: np.ndarray) -> np.ndarray:
        """Scaled rewards; truncated episodes add gamma times the value of going on from s_{t+1}.

        That value is U(s_{t+1}, w_t) in options mode (``arrival_value``) and Q(s_{t+1}, w) in flat mode.
        """
        cfg = self.config
        if cfg.scale_rewards:
            if self.explore:
                self.ret_norm.update(end.reward, end.episode_ends)
            scaled = self.ret_norm(end.reward)
        else:
            scaled = end.reward
        trunc_ids = np.flatnonzero(end.truncated)
        if trunc_ids.size:
            if end.bootstrap is None:
                q_trunc = self.q_values(self.features(_take(after, trunc_ids), self._clock(trunc_ids, skill=w)))
                boot = q_trunc[np.arange(trunc_ids.size), w[trunc_ids]]
            else:
                boot = end.bootstrap[trunc_ids]
            scaled = scaled.copy()
            scaled[trunc_ids] += cfg.gamma * boot
        return scaled

    def _next_skills(self, after: dict[str, np.ndarray], end: StepEnd) -> None:
        """Run the chosen skill where one switched inside an episode; fresh starts where episodes ended."""
        sw = np.flatnonzero(end.switched)
        if sw.size:
            self.skill[sw] = end.next_skill[sw]
            self.skill_steps[sw] = 0
        done_ids = np.flatnonzero(end.episode_ends)
        if done_ids.size:
            self._reset(done_ids)

    def _apply_input_normalisers(self) -> None:
        """Copy running input statistics into the adapting controllers (fixed during a rollout)."""
        for k, moments in self.input_moments.items():
            if moments.count < 2:
                continue
            mean_buf, std_buf = self.skills[k].input_normaliser
            with torch.no_grad():
                mean_buf.copy_(torch.from_numpy(moments.mean))
                std_buf.copy_(torch.from_numpy(np.maximum(np.sqrt(moments.var), 1e-3)))
            self.skills[k].controller.project_()

    # ----- checkpoint support -----------------------------------------------------

    def carry_tensors(self) -> dict[str, np.ndarray]:
        """Everything needed to continue the current episodes bit for bit."""
        return {
            "carry.sim_state": self.sim.integration_state(),
            "carry.skill": self.skill.copy(),
            "carry.skill_steps": self.skill_steps.copy(),
            "carry.episode_steps": self.episode_steps.copy(),
            "carry.episode_return": self.episode_return.copy(),
            **{k: v for i, m in self.input_moments.items() for k, v in m.tensors(f"carry.inputs{i}").items()},
        }

    def load_carry(self, tensors: dict[str, np.ndarray]) -> None:
        try:
            self.sim.restore_integration_state(tensors["carry.sim_state"])
        except ValueError as exc:
            raise TrainingError(f"checkpoint {exc}; resume with the parallel_envs and rig the run started with") from None
        self.skill = tensors["carry.skill"].astype(np.int64).copy()
        self.skill_steps = tensors["carry.skill_steps"].astype(np.int64).copy()
        self.episode_steps = tensors["carry.episode_steps"].astype(np.int64).copy()
        self.episode_return = tensors["carry.episode_return"].copy()
        for i, m in self.input_moments.items():
            m.load(tensors, f"carry.inputs{i}")
        self.state = self.sim.state(extra=self.extra)

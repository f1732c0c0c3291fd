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
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import torch

from kinetome.library.errors import TrainingError

from .config import TrainConfig
from .normaliser import ObservationNormaliser, ReturnNormaliser, RunningMoments
from .skill_policy import choose_skills, skill_values
from .starts import StartSampler
from .trainable import TrainableSkill

__all__ = ["Rollout", "EpisodeStats", "Collector"]

_MAX_START_ROUNDS = 100


@dataclass
class Rollout:
    """One update's samples, time-major (T, N, ...), plus the bootstrap values (N,)."""

    features: np.ndarray  # (T, N, n_obs) critic inputs (normalised)
    inputs: dict[str, np.ndarray]  # name -> (T, N, *shape) controller inputs
    skill: np.ndarray  # (T, N) int64
    skill_time: np.ndarray  # (T, N) seconds since the skill started
    actions: np.ndarray  # (T, N, n_act) pre-clip samples
    log_prob: np.ndarray  # (T, N)
    values: np.ndarray  # (T, N) Q(s_t, w_t)
    rewards: np.ndarray  # (T, N) scaled, switch cost and truncation bootstrap included
    dones: np.ndarray  # (T, N) bool
    last_values: np.ndarray  # (N,)
    term_features: np.ndarray  # (T, N, n_obs) features of s_{t+1}
    term_weight: np.ndarray  # (T, N) 1 where beta(s_{t+1}, w_t) was a learned decision
    term_advantage: np.ndarray  # (T, N) Q(s_{t+1}, w_t) - V(s_{t+1})
    reward_scale: float = 1.0


@dataclass
class EpisodeStats:
    """What finished during one rollout."""

    returns: list[float] = field(default_factory=list)
    lengths: list[int] = field(default_factory=list)
    successes: list[bool] = field(default_factory=list)
    skill_durations: list[int] = field(default_factory=list)
    skill_steps: int = 0
    terminations: int = 0
    learned_terminations: int = 0
    no_skill_available: int = 0
    skill_counts: np.ndarray | None = None  # (n_skills,) env steps each skill ran

    def summary(self) -> dict[str, float]:
        nan = float("nan")
        return {
            "episodes": len(self.returns),
            "return_mean": float(np.mean(self.returns)) if self.returns else nan,
            "length_mean": float(np.mean(self.lengths)) if self.lengths else nan,
            "success_rate": float(np.mean(self.successes)) if self.successes else nan,
            "termination_rate": self.terminations / self.skill_steps if self.skill_steps else nan,
            "mean_skill_duration": float(np.mean(self.skill_durations)) if self.skill_durations else nan,
            "no_skill_available": self.no_skill_available,
            "skill_share": (self.skill_counts / self.skill_counts.sum()).tolist()
            if self.skill_counts is not None and self.skill_counts.sum() > 0
            else [],
        }


def _flatten(state: dict[str, np.ndarray], names: Sequence[str], ids: np.ndarray) -> np.ndarray:
    return np.concatenate([state[n][ids].reshape(ids.size, -1) for n in names], axis=1)


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

    def features(self, state: dict[str, np.ndarray], *, update: bool = False) -> np.ndarray:
        obs = np.asarray(self.rig.observe(state), dtype=np.float64)
        if not np.all(np.isfinite(obs)):
            rows = np.flatnonzero(~np.all(np.isfinite(obs), axis=1))
            raise TrainingError(
                f"observation must be finite, got NaN/Inf in simulations {rows[:5].tolist()} of {self.rig.env_id}; "
                "the physics diverged: lower the learning rate or tighten the controller bounds"
            )
        if not self.config.standardise_observations:
            return obs
        if update:
            self.obs_norm.update(obs)
        return self.obs_norm(obs)

    def q_values(self, features: np.ndarray) -> np.ndarray:
        with torch.no_grad():
            return self.critic(torch.from_numpy(features)).numpy()

    def available(self, state: dict[str, np.ndarray]) -> np.ndarray:
        return np.stack([s.starts(state) for s in self.skills], axis=1)

    def _choose(self, state: dict[str, np.ndarray]) -> np.ndarray:
        n = len(next(iter(state.values())))
        if len(self.skills) == 1:
            return np.zeros(n, dtype=np.int64)
        avail = self.available(state)
        self.stats.no_skill_available += int(np.sum(~avail.any(axis=1)))
        q = self.q_values(self.features(state))
        return choose_skills(q, avail, epsilon=self.epsilon, rng=self.np_rng)

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
                f"for {pending.size} simulations; give a start distribution inside starts_when"
            )
        ids = np.asarray(ids, dtype=np.int64)
        self.skill_steps[ids] = 0
        self.episode_steps[ids] = 0
        self.episode_return[ids] = 0.0
        self.skill[ids] = self._choose(_take(self.state, ids))

    # ----- one rollout ----------------------------------------------------------

    def collect(self) -> Rollout:
        cfg, rig, n, T = self.config, self.rig, self.n, self.config.segment_steps
        K = len(self.skills)
        dt = rig.dt
        self.stats = EpisodeStats()
        if self.explore:
            self._apply_input_normalisers()
        n_act = rig.n_act
        buf_inputs = {name: np.zeros((T, *self.state[name].shape)) for name in self.input_names}
        n_obs = None
        rows = np.arange(n)
        out: dict[str, np.ndarray] = {}
        for t in range(T):
            state = self.state
            feats = self.features(state, update=self.explore)
            if n_obs is None:
                n_obs = feats.shape[1]
                out = {
                    "features": np.zeros((T, n, n_obs)),
                    "term_features": np.zeros((T, n, n_obs)),
                    "skill": np.zeros((T, n), dtype=np.int64),
                    "skill_time": np.zeros((T, n)),
                    "actions": np.zeros((T, n, n_act)),
                    "log_prob": np.zeros((T, n)),
                    "values": np.zeros((T, n)),
                    "rewards": np.zeros((T, n)),
                    "dones": np.zeros((T, n), dtype=bool),
                    "term_weight": np.zeros((T, n)),
                    "term_advantage": np.zeros((T, n)),
                }
            q = self.q_values(feats)
            w = self.skill.copy()
            skill_time = self.skill_steps * dt
            actions = np.zeros((n, n_act))
            log_prob = np.zeros(n)
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
            applied = self.sim.step(actions)
            after = self.sim.state(extra=self.extra)
            reward, _ = rig.reward(state, applied, after)
            reward = np.asarray(reward, dtype=np.float64)
            if not np.all(np.isfinite(reward)):
                bad = np.flatnonzero(~np.isfinite(reward))
                raise TrainingError(
                    f"reward must be finite, got {reward[bad[0]]} in simulations {bad[:5].tolist()} of {rig.env_id}; "
                    "check the task reward and the variant's physics"
                )
            terminated = np.asarray(rig.terminated(after), dtype=bool)
            self.episode_steps += 1
            self.skill_steps += 1
            self.episode_return += reward
            stops = np.zeros(n, dtype=bool)
            for k, sk in enumerate(self.skills):
                ids = np.flatnonzero(w == k)
                if ids.size and sk.stops_when is not None:
                    stops[ids] = sk.stops(_take(after, ids))
            max_steps = np.array([s.max_steps for s in self.skills])[w]
            timeout = self.skill_steps >= max_steps
            over_limit = self.episode_steps >= self.limit
            feats_after = None
            q_after = None
            term_weight = np.zeros(n)
            term_adv = np.zeros(n)
            if self.episode_per_skill:
                success = stops & ~terminated
                terminal = terminated | success
                truncated = (timeout | over_limit) & ~terminal
                skill_ends = terminal | truncated
                switched = np.zeros(n, dtype=bool)
                reward_raw = reward + cfg.success_bonus * success
                if self.skills[0].stops_when is not None:  # a skill that cannot stop has no success rate
                    self.stats.successes.extend(success[terminal | truncated].tolist())
                learned_stop = np.zeros(n, dtype=bool)
            else:
                terminal = terminated
                truncated = over_limit & ~terminal
                feats_after = self.features(after)
                q_after = self.q_values(feats_after)
                forced = timeout.copy()
                if cfg.stop_mode in ("registered", "hard"):
                    forced |= stops
                if cfg.stop_mode == "learned":
                    learnable = np.ones(n, dtype=bool)
                elif cfg.stop_mode == "hard":
                    learnable = ~stops
                elif cfg.stop_mode == "confined":
                    learnable = stops
                else:
                    learnable = np.zeros(n, dtype=bool)
                learnable &= ~forced
                learned_stop = np.zeros(n, dtype=bool)
                if self.heads is not None and learnable.any():
                    with torch.no_grad():
                        beta = self.heads.beta(torch.from_numpy(feats_after), torch.from_numpy(w)).numpy()
                    u = self.np_rng.random(n)
                    learned_stop = learnable & (u < beta)
                ep_end = terminal | truncated
                skill_ends = forced | learned_stop | ep_end
                switched = (forced | learned_stop) & ~ep_end
                reward_raw = reward - cfg.deliberation_cost * switched
                avail_after = self.available(after)
                v_after = skill_values(q_after, avail_after, epsilon=self.epsilon)
                term_adv = q_after[rows, w] - v_after
                term_weight = (learnable & ~ep_end).astype(np.float64)
                out["term_features"][t] = feats_after
            ep_end = terminal | truncated
            # statistics
            self.stats.skill_steps += n
            counts = np.bincount(w, minlength=K)
            self.stats.skill_counts = counts if self.stats.skill_counts is None else self.stats.skill_counts + counts
            ended = np.flatnonzero(skill_ends)
            self.stats.skill_durations.extend(self.skill_steps[ended].tolist())
            self.stats.terminations += int(np.sum(skill_ends & ~ep_end))
            self.stats.learned_terminations += int(np.sum(learned_stop & ~ep_end))
            done_ids = np.flatnonzero(ep_end)
            self.stats.returns.extend(self.episode_return[done_ids].tolist())
            self.stats.lengths.extend(self.episode_steps[done_ids].tolist())
            # rewards: scale, then bootstrap truncated episodes with Q(s_{t+1}, w_t)
            if cfg.scale_rewards:
                if self.explore:
                    self.ret_norm.update(reward_raw, ep_end)
                scaled = self.ret_norm(reward_raw)
            else:
                scaled = reward_raw
            trunc_ids = np.flatnonzero(truncated)
            if trunc_ids.size:
                if q_after is None:
                    q_trunc = self.q_values(self.features(_take(after, trunc_ids)))
                    boot = q_trunc[np.arange(trunc_ids.size), w[trunc_ids]]
                else:
                    boot = q_after[trunc_ids, w[trunc_ids]]
                scaled = scaled.copy()
                scaled[trunc_ids] += cfg.gamma * boot
            # store
            out["features"][t] = feats
            for name in self.input_names:
                buf_inputs[name][t] = state[name]
            out["skill"][t] = w
            out["skill_time"][t] = skill_time
            out["actions"][t] = actions
            out["log_prob"][t] = log_prob
            out["values"][t] = q[rows, w]
            out["rewards"][t] = scaled
            out["dones"][t] = ep_end
            out["term_weight"][t] = term_weight
            out["term_advantage"][t] = term_adv
            # next skills for switches inside an episode, fresh starts for ended episodes
            self.state = after
            sw = np.flatnonzero(switched)
            if sw.size:
                sub = _take(after, sw)
                avail = self.available(sub)
                self.stats.no_skill_available += int(np.sum(~avail.any(axis=1)))
                self.skill[sw] = choose_skills(q_after[sw], avail, epsilon=self.epsilon, rng=self.np_rng)
                self.skill_steps[sw] = 0
            if done_ids.size:
                self._reset(done_ids)
        last_feats = self.features(self.state)
        last_values = self.q_values(last_feats)[rows, self.skill]
        return Rollout(
            features=out["features"],
            inputs=buf_inputs,
            skill=out["skill"],
            skill_time=out["skill_time"],
            actions=out["actions"],
            log_prob=out["log_prob"],
            values=out["values"],
            rewards=out["rewards"],
            dones=out["dones"],
            last_values=last_values,
            term_features=out["term_features"],
            term_weight=out["term_weight"],
            term_advantage=out["term_advantage"],
            reward_scale=self.ret_norm.scale if cfg.scale_rewards else 1.0,
        )

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

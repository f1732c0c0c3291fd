"""Run skills under their chooser inside one task episode, as they were trained in options mode.

Call-and-return: when no skill is running, the chooser picks the available
skill (``starts_when`` holds) with the highest Q; that skill acts until its
stop (``stops_when`` and/or its learned stop, as the version declares), its
``max_steps``, or the end of the episode. A step where no skill is available
ends the episode as ``refused``. Choosing the same skill again right after
it stopped by a forced stop (``stops_when`` in the registered or hard mode)
continues the same turn: its clock runs on and no new turn is counted, as in
training. Episodes end when the env ends them (``env_ended``), at the
episode step limit (``timed_out``) or on a refusal (``refused``).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from kinetome.envs.named_state import take_states

from .learned import Chooser, StopDraws, phase_angles, stop_rule
from .seeding import ExplorationNoise
from .sim import SimBatch
from .skill import LoadedSkill

__all__ = ["OptionsRollout", "run_options", "EPISODE_ENDS"]

EPISODE_ENDS = ("env_ended", "timed_out", "refused")  # how an episode ended (the vocabulary's outcomes)
_NONE = -1


@dataclass(frozen=True, eq=False)
class OptionsRollout:
    """n episodes under a chooser. Per episode: return, steps, how it ended, turns, steps per skill.

    ``turn_*`` list every turn of every episode in order (episode index,
    skill index, steps, and whether it ended by the skill's own stop).
    """

    env_id: str
    seed: int
    gamma: float
    skill_refs: tuple[str, ...]
    returns: np.ndarray  # (n,)
    discounted_returns: np.ndarray  # (n,)
    steps: np.ndarray  # (n,) int64
    ended: np.ndarray  # (n,) int8, index into EPISODE_ENDS
    skill_steps: np.ndarray  # (n, n_skills) int64
    turn_episode: np.ndarray
    turn_skill: np.ndarray
    turn_steps: np.ndarray
    turn_stopped: np.ndarray  # bool: the skill's own stop (not a timeout or the episode's end)

    @property
    def n_episodes(self) -> int:
        return int(self.returns.shape[0])

    def summary(self) -> dict[str, Any]:
        n = self.n_episodes
        total = self.skill_steps.sum()
        return {
            "env": self.env_id,
            "episodes": n,
            "seed": self.seed,
            "skills": list(self.skill_refs),
            "return": {"mean": float(np.mean(self.returns)), "std": float(np.std(self.returns)),
                       "discounted_mean": float(np.mean(self.discounted_returns)), "gamma": self.gamma},
            "duration": {"mean": float(np.mean(self.steps)), "max": int(np.max(self.steps))},
            "outcomes": {label: int(np.sum(self.ended == i)) for i, label in enumerate(EPISODE_ENDS)},
            "turns_per_episode": float(self.turn_steps.size / n) if n else float("nan"),
            "turn_duration_mean": float(np.mean(self.turn_steps)) if self.turn_steps.size else float("nan"),
            "skill_share": {ref: float(s / total) if total else 0.0 for ref, s in zip(self.skill_refs, self.skill_steps.sum(axis=0))},
        }


class _Episodes:
    """Per-episode counters of a batched options run."""

    def __init__(self, n: int, k: int):
        self.active = np.ones(n, dtype=bool)
        self.current = np.full(n, _NONE, dtype=np.int64)  # running skill; -1: choose one
        self.pending = np.full(n, _NONE, dtype=np.int64)  # skill stopped by a forced stop, turn not yet closed
        self.clock = np.zeros(n, dtype=np.int64)  # steps of the current turn
        self.last = np.zeros(n, dtype=np.int64)  # the skill that ran last
        self.returns = np.zeros(n)
        self.discounted = np.zeros(n)
        self.steps = np.zeros(n, dtype=np.int64)
        self.ended = np.zeros(n, dtype=np.int8)
        self.skill_steps = np.zeros((n, k), dtype=np.int64)
        self.turns: list[tuple[int, int, int, bool]] = []

    def close(self, ids: np.ndarray, skills: np.ndarray, stopped: bool) -> None:
        for i, k in zip(ids, skills):
            self.turns.append((int(i), int(k), int(self.clock[i]), stopped))

    def close_pending(self, ids: np.ndarray) -> None:
        ids = ids[self.pending[ids] != _NONE]
        self.close(ids, self.pending[ids], True)
        self.pending[ids] = _NONE

    def finish(self, ids: np.ndarray, how: str) -> None:
        running = ids[self.current[ids] != _NONE]
        self.close(running, self.current[running], False)
        self.close_pending(ids)
        self.current[ids] = _NONE
        self.active[ids] = False
        self.ended[ids] = EPISODE_ENDS.index(how)

    def rollout(self, rig: Any, seed: int, gamma: float, refs: tuple[str, ...]) -> OptionsRollout:
        turns = np.array(self.turns, dtype=np.int64).reshape(-1, 4)
        return OptionsRollout(
            env_id=rig.env_id, seed=seed, gamma=gamma, skill_refs=refs, returns=self.returns,
            discounted_returns=self.discounted, steps=self.steps, ended=self.ended, skill_steps=self.skill_steps,
            turn_episode=turns[:, 0], turn_skill=turns[:, 1], turn_steps=turns[:, 2], turn_stopped=turns[:, 3].astype(bool),
        )


def _choose(skills: Sequence[LoadedSkill], chooser: Chooser, sim: SimBatch, ep: _Episodes, extra: tuple) -> None:
    """Give a skill to every active episode without one; refuse where none is available."""
    need = np.flatnonzero(ep.active & (ep.current == _NONE))
    if need.size == 0:
        return
    state = sim.state(need, extra=extra)
    available = np.stack([s.starts_when.evaluate({**s.parameters, **state}) for s in skills], axis=1)
    # clock inputs as in training: steps so far, and the phase of the skill that ran last at its clock
    phase = phase_angles([s.controller for s in skills], ep.last[need], ep.clock[need] * sim.rig.dt)
    choice = chooser.choose(sim.rig, state, available, episode_step=ep.steps[need], phase=phase)
    ep.finish(need[choice < 0], "refused")
    ids, choice = need[choice >= 0], choice[choice >= 0]
    same = choice == ep.pending[ids]  # the same skill right after a forced stop: its turn goes on
    ep.pending[ids[same]] = _NONE
    ep.close_pending(ids[~same])
    ep.clock[ids[~same]] = 0
    ep.current[ids] = choice


def _act(skills, sim: SimBatch, ep: _Episodes, ids: np.ndarray, state: dict, noise: ExplorationNoise | None) -> np.ndarray:
    """Actions (len(ids), n_act): one controller call per skill for the episodes running it."""
    actions = np.zeros((ids.size, sim.rig.n_act))
    for k, skill in enumerate(skills):
        rows = np.flatnonzero(ep.current[ids] == k)
        if rows.size:
            draws = noise.draw(ids[rows]) if noise is not None else None
            sub = take_states(state, rows)
            actions[rows] = skill.controller.act(sub, ep.clock[ids[rows]] * sim.rig.dt, noise=draws)
    return actions


def _end_turns(skills, sim: SimBatch, ep: _Episodes, ids: np.ndarray, after: dict, draws: StopDraws | None) -> None:
    """Close the turns that stopped or timed out after this step; forced stops wait for the next choice.

    As in training, a learned stop is only possible where some skill could take over.
    """
    could_switch = np.zeros(ids.size, dtype=bool)
    for skill in skills:
        could_switch |= skill.starts_when.evaluate({**skill.parameters, **after})
    for k, skill in enumerate(skills):
        rows = np.flatnonzero(ep.current[ids] == k)
        if rows.size == 0:
            continue
        sub, run = take_states(after, rows), ids[rows]
        ep.last[run] = k
        holds = skill.stops_when.evaluate({**skill.parameters, **sub})
        timeout = ep.clock[run] >= skill.max_steps
        mode = "registered" if skill.learned_stop is None else skill.learned_stop.mode
        by_rule, learnable = stop_rule(mode, holds, np.zeros(rows.size, dtype=bool))
        learned = np.zeros(rows.size, dtype=bool)
        if skill.learned_stop is not None:
            phase = phase_angles([skill.controller], np.zeros(rows.size, dtype=np.int64), ep.clock[run] * sim.rig.dt)
            beta = skill.learned_stop.probability(sim.rig, sub, episode_step=ep.steps[run], phase=phase)
            learned = learnable & could_switch[rows] & ~timeout & (draws.draw(run) < beta)
        timeout &= ~by_rule
        ep.close(run[learned], np.full(int(learned.sum()), k), True)
        ep.close(run[timeout], np.full(int(timeout.sum()), k), False)
        ep.pending[run[by_rule]] = k
        ep.current[run[learned | timeout | by_rule]] = _NONE


def run_options(
    skills: Sequence[LoadedSkill],
    chooser: Chooser,
    rig: Any,
    *,
    starts: tuple[np.ndarray, np.ndarray],
    seed: int,
    workers: int = 1,
    gamma: float = 0.99,
    explore: bool = False,
    episode_steps: int | None = None,
    progress: Callable[[int, int], None] | None = None,
) -> OptionsRollout:
    """Run ``skills`` under ``chooser`` from each start; one batch for all episodes."""
    refs = tuple(s.ref for s in skills)
    if refs != chooser.skill_refs:
        raise ValueError(f"skills must be the chooser's, in its order {list(chooser.skill_refs)}, got {list(refs)}")
    qpos0, qvel0 = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n, limit = qpos0.shape[0], int(episode_steps or rig.max_episode_steps)
    sim = SimBatch(rig, n, nthread=workers)
    sim.reset(qpos0, qvel0)
    extra = tuple(sorted({x for s in skills for x in (getattr(s.controller, "needs", ()) or ())}))
    noise = ExplorationNoise(seed, n, rig.n_act) if explore else None
    draws = StopDraws(seed, n)
    ep = _Episodes(n, len(skills))
    from ..controllers.kernels import torch_threads

    with torch_threads(1):
        for t in range(limit):
            _choose(skills, chooser, sim, ep, extra)
            ids = np.flatnonzero(ep.active)
            if ids.size == 0:
                break
            _step(skills, sim, ep, ids, noise, draws, gamma, extra, t)
            ep.finish(ids[ep.active[ids] & (ep.steps[ids] >= limit)], "timed_out")
            if progress is not None:
                progress(t + 1, limit)
    return ep.rollout(rig, seed, gamma, refs)


def _step(skills, sim: SimBatch, ep: _Episodes, ids: np.ndarray, noise, draws, gamma: float, extra: tuple, t: int) -> None:
    """One env step of the running episodes: act, reward, env end, stops."""
    state = sim.state(ids, extra=extra)
    applied = sim.step(_act(skills, sim, ep, ids, state, noise), ids)
    after = sim.state(ids, extra=extra)
    reward, _ = sim.rig.reward(state, applied, after)
    ep.returns[ids] += reward
    ep.discounted[ids] += gamma**t * reward
    ep.steps[ids] += 1
    ep.clock[ids] += 1
    np.add.at(ep.skill_steps, (ids, ep.current[ids]), 1)
    ended = np.asarray(sim.rig.terminated(after), dtype=bool)
    ep.finish(ids[ended], "env_ended")
    live = ~ended
    _end_turns(skills, sim, ep, ids[live], take_states(after, live), draws)

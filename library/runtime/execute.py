"""Execute skills and chains as options, call-and-return, on batched simulations.

Each skill of a chain starts where the previous one ended (after it stopped
or timed out), refuses when its ``starts_when`` is false, then acts until
``stops_when`` holds, ``max_steps`` pass, or the env terminates. The batched
path makes one controller call and one predicate evaluation per step for all
running episodes; ``reference_run_chain`` does the same one env at a time
through ``RigEnv`` and must give identical records.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable, Sequence

import numpy as np

from kinetome.envs.named_state import take_states
from kinetome.envs.rig import Rig

from .disturbances import NO_DISTURBANCES, Disturbances, DisturbanceStreams
from .learned import StopDraws, phase_angles
from .records import ChainRollout, EndReason, SegmentRecord
from .seeding import ExplorationNoise
from .sim import SimBatch, _qpos_of
from .skill import LoadedSkill

__all__ = ["run_chain", "run_skill", "reference_run_chain", "Progress"]

# progress(done, total): done/total in env steps of the longest possible run
Progress = Callable[[int, int], None]



def _needs(skill: LoadedSkill) -> tuple[str, ...]:
    return tuple(getattr(skill.controller, "needs", ()) or ())


def _inputs(skill: LoadedSkill) -> tuple[str, ...]:
    """Named quantities the controller reads (sensor noise applies to these)."""
    return tuple(getattr(skill.controller, "inputs", ()) or ())


def _hands_on(reason: np.ndarray, may_time_out: bool) -> np.ndarray:
    """Episodes whose next skill is offered the state: the skill stopped, or timed out where allowed."""
    ok = reason == int(EndReason.STOPPED)
    return ok | (reason == int(EndReason.TIMED_OUT)) if may_time_out else ok


def _timeout_flags(skills: Sequence[LoadedSkill], may_time_out: Sequence[bool] | None) -> tuple[bool, ...]:
    if may_time_out is None:
        return tuple(True for _ in skills)
    flags = tuple(bool(x) for x in may_time_out)
    if len(flags) != len(skills):
        raise ValueError(f"may_time_out needs one flag per skill ({len(skills)}), got {len(flags)}")
    return flags


# limit name -> (quantity, how one state's magnitude is measured)
_PEAK_MEASURES = {
    "joint_speed": ("qvel", lambda v: np.max(np.abs(v.reshape(len(v), -1)), axis=1)),
    "end_effector_speed": ("fingertip_vel", lambda v: np.linalg.norm(v.reshape(len(v), -1), axis=1)),
    "torque": ("torque", lambda v: np.max(np.abs(v.reshape(len(v), -1)), axis=1)),
}


class _Segment:
    """Accumulators of one chain step over all n episodes."""

    def __init__(self, n: int):
        self.reason = np.full(n, int(EndReason.NOT_REACHED), dtype=np.int8)
        self.steps = np.zeros(n, dtype=np.int64)
        self.reward = np.zeros(n)
        self.discounted = np.zeros(n)
        self.peaks = {name: np.zeros(n) for name in _PEAK_MEASURES}
        self.first_command: np.ndarray | None = None  # (n, n_act), NaN where the skill never acted
        self.last_command: np.ndarray | None = None

    def commanded(self, rows: np.ndarray, command: np.ndarray, t: int) -> None:
        """Remember the controller's first and latest command per episode (for the switch jump)."""
        if self.first_command is None:
            n = self.reason.shape[0]
            self.first_command = np.full((n, command.shape[1]), np.nan)
            self.last_command = np.full((n, command.shape[1]), np.nan)
        if t == 0:
            self.first_command[rows] = command
        self.last_command[rows] = command

    def observe(self, rows: np.ndarray, after: dict[str, np.ndarray]) -> None:
        """Track the largest speed/torque each episode reached (for the declared-limits report of `kinetome run`)."""
        for name, (quantity, measure) in _PEAK_MEASURES.items():
            if quantity in after:
                self.peaks[name][rows] = np.maximum(self.peaks[name][rows], measure(after[quantity]))

    def record(self, ref: str, start: dict, end: dict, gamma: float) -> SegmentRecord:
        return SegmentRecord(
            skill_ref=ref,
            start_state=start,
            end_state=end,
            reason=self.reason,
            steps=self.steps,
            reward=self.reward,
            discounted_return=self.discounted,
            discount=np.power(gamma, self.steps.astype(np.float64)),
            peaks=self.peaks,
            first_command=self.first_command,
            last_command=self.last_command,
        )


def _classify(
    skill: LoadedSkill, rig: Rig, after: dict, t_next: int, u: np.ndarray | None = None, episode_step: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(terminated, stopped, timed_out) masks after a step; terminated wins over stopped, stopped over timed out.

    A skill with a learned stop stops as its stop mode says, deciding with the uniform draws ``u``
    (``episode_step``: steps since the episode began, for a stop head trained with the time remaining).
    """
    terminated = np.asarray(rig.terminated(after), dtype=bool)
    stopped = skill.stops_when.evaluate({**skill.parameters, **after})
    if skill.learned_stop is not None:
        n = len(stopped)
        timeout = np.full(n, t_next >= skill.max_steps)
        phase = phase_angles([skill.controller], np.zeros(n, dtype=np.int64), np.full(n, t_next * rig.dt))
        beta = skill.learned_stop.probability(rig, after, episode_step=episode_step, phase=phase)
        stopped = skill.learned_stop.decide(stopped, timeout, beta, u)
    stopped = stopped & ~terminated
    timed_out = ~terminated & ~stopped & (t_next >= skill.max_steps)
    return terminated, stopped, timed_out


def _stop_draws(skills: Sequence[LoadedSkill], seed: int, ids: np.ndarray) -> StopDraws | None:
    return StopDraws(seed, len(ids), episode_ids=ids) if any(s.learned_stop is not None for s in skills) else None


def _run_segment(
    skill: LoadedSkill,
    sim: SimBatch,
    offered: np.ndarray,
    seg: _Segment,
    *,
    gamma: float,
    noise: ExplorationNoise | None,
    stop_draws: StopDraws | None,
    streams: DisturbanceStreams | None,
    tracer: "_Tracer | None",
    index: int,
    progress: Progress | None,
    offset: np.ndarray | None = None,
) -> None:
    """Run ``skill`` from the episodes ``offered`` (``offset``: steps each episode ran before this skill)."""
    rig = sim.rig
    needs = _needs(skill)
    if offered.size == 0:
        return
    start = sim.state(offered, extra=needs)
    accepted = skill.starts_when.evaluate({**skill.parameters, **start})
    seg.reason[offered[~accepted]] = int(EndReason.REFUSED)
    running = offered[accepted]
    state = take_states(start, accepted)
    dt = rig.dt  # read once: a property that reads the model
    for t in range(skill.max_steps):
        if running.size == 0:
            break
        draws = noise.draw(running) if noise is not None else None
        sensed = state if streams is None else streams.sense(state, running, _inputs(skill))
        action = skill.controller.act(sensed, np.full(running.size, t * dt), noise=draws)
        seg.commanded(running, np.asarray(action, dtype=np.float64), t)
        if streams is not None:
            action = streams.command(action, running)
        applied = sim.step(action, running)
        after = sim.state(running, extra=needs)
        reward, _ = rig.reward(state, applied, after)
        seg.reward[running] += reward
        seg.discounted[running] += gamma**t * reward
        seg.steps[running] += 1
        seg.observe(running, after)
        if tracer is not None:
            tracer.record(sim, running, index)
        u = stop_draws.draw(running) if stop_draws is not None and skill.learned_stop is not None else None
        steps = None if offset is None else offset[running] + t + 1
        terminated, stopped, timed_out = _classify(skill, rig, after, t + 1, u, steps)
        seg.reason[running[terminated]] = int(EndReason.ENV_ENDED)
        seg.reason[running[stopped]] = int(EndReason.STOPPED)
        seg.reason[running[timed_out]] = int(EndReason.TIMED_OUT)
        keep = ~(terminated | stopped | timed_out)
        if not keep.all():
            running = running[keep]
            after = take_states(after, keep)
        state = after
        if progress is not None:
            progress(t + 1, skill.max_steps)


class _Tracer:
    """qpos after every step of the first few episodes, for filmstrips."""

    def __init__(self, sim: SimBatch, n_traced: int):
        self.ids = np.arange(min(n_traced, sim.n))
        self.frames: list[list[np.ndarray]] = [[_qpos_of(sim, np.array([i]))[0]] for i in self.ids]
        self.segment: list[list[int]] = [[0] for _ in self.ids]

    def record(self, sim: SimBatch, running: np.ndarray, index: int) -> None:
        traced = running[running < len(self.ids)]
        if traced.size:
            rows = _qpos_of(sim, traced)
            for i, row in zip(traced, rows):
                self.frames[int(i)].append(row)
                self.segment[int(i)].append(index)

    def arrays(self, nq: int) -> tuple[np.ndarray, np.ndarray]:
        length = max(len(f) for f in self.frames)
        qpos = np.full((len(self.frames), length, nq), np.nan)
        seg = np.full((len(self.frames), length), -1, dtype=np.int64)
        for i, (frames, segs) in enumerate(zip(self.frames, self.segment)):
            qpos[i, : len(frames)] = np.stack(frames)
            seg[i, : len(segs)] = segs
        return qpos, seg


def run_chain(
    skills: Sequence[LoadedSkill],
    rig: Rig,
    *,
    starts: tuple[np.ndarray, np.ndarray],
    seed: int,
    workers: int = 1,
    gamma: float = 0.99,
    explore: bool = False,
    trace: int = 0,
    progress: Progress | None = None,
    disturbances: Disturbances | None = None,
    episode_ids: np.ndarray | None = None,
    may_time_out: Sequence[bool] | None = None,
) -> ChainRollout:
    """Run ``skills`` call-and-return from each start state; one batch for all episodes.

    ``episode_ids`` (default 0..n-1) name each row's random streams, so a block of a
    larger run gives the same episodes as the whole run. ``may_time_out`` (one flag
    per skill; default: every skill may) says whether the next skill is offered the
    state after a timeout; otherwise the episode's chain ends there.
    ``disturbances.exploration`` has the same effect as ``explore``.
    """
    qpos0, qvel0 = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n = qpos0.shape[0]
    r = _setup(skills, rig, n, seed=seed, explore=explore, disturbances=disturbances, episode_ids=episode_ids, may_time_out=may_time_out)
    sim = SimBatch(rig, n, nthread=workers)
    sim.reset(qpos0, qvel0)
    tracer = _Tracer(sim, trace) if trace > 0 else None
    offered = np.arange(n)
    records: list[SegmentRecord] = []
    from ..controllers.kernels import torch_threads

    longest = sum(int(s.max_steps) for s in skills)
    done_before = 0
    with torch_threads(1):
        for index, skill in enumerate(skills):
            seg = _Segment(n)
            start = sim.state()
            # progress counts steps of the longest possible chain run, across segments
            segment_progress = None if progress is None else (lambda t, _m, before=done_before: progress(before + t, longest))
            _run_segment(
                skill, sim, offered, seg, gamma=gamma, noise=r.noise, stop_draws=r.stop_draws, streams=r.streams, tracer=tracer,
                index=index, progress=segment_progress, offset=np.sum([rec.steps for rec in records], axis=0) if records else np.zeros(n, dtype=np.int64),
            )
            done_before += int(skill.max_steps)
            if progress is not None:
                progress(done_before, longest)
            records.append(seg.record(skill.ref, start, sim.state(), gamma))
            offered = np.flatnonzero(_hands_on(seg.reason, r.flags[index]))
    qpos_trace, seg_trace = tracer.arrays(rig.model.nq) if tracer is not None else (None, None)
    return ChainRollout(
        env_id=rig.env_id,
        seed=seed,
        gamma=gamma,
        segments=tuple(records),
        qpos_trace=qpos_trace,
        segment_of_step=seg_trace,
        meta={"workers": workers, "explore": r.explore, "disturbances": r.disturbances.to_dict(), "may_time_out": list(r.flags)},
        episode_ids=r.ids,
    )


@dataclass(frozen=True, eq=False)
class _Streams:
    """Everything random or per-episode in one run: ids, timeout flags, noise, stop draws, disturbances."""

    ids: np.ndarray
    flags: tuple[bool, ...]
    disturbances: Disturbances
    explore: bool
    noise: ExplorationNoise | None
    stop_draws: StopDraws | None
    streams: DisturbanceStreams | None


def _setup(skills: Sequence[LoadedSkill], rig: Rig, n: int, *, seed: int, explore: bool, disturbances: Disturbances | None,
           episode_ids: np.ndarray | None, may_time_out: Sequence[bool] | None) -> _Streams:
    if not skills:
        raise ValueError("a chain needs at least one skill")
    ids = _episode_ids(episode_ids, n)
    d = disturbances or NO_DISTURBANCES
    explore = explore or d.exploration
    return _Streams(
        ids, _timeout_flags(skills, may_time_out), d, explore,
        ExplorationNoise(seed, n, rig.n_act, episode_ids=ids) if explore else None,
        _stop_draws(skills, seed, ids),
        DisturbanceStreams(d, seed=seed, episode_ids=ids, n_act=rig.n_act) if d.active else None,
    )


def _episode_ids(episode_ids: np.ndarray | None, n: int) -> np.ndarray:
    if episode_ids is None:
        return np.arange(n)
    ids = np.asarray(episode_ids, dtype=np.int64).reshape(-1)
    if ids.size != n:
        raise ValueError(f"episode_ids needs one id per start state ({n}), got {ids.size}")
    return ids


def run_skill(skill: LoadedSkill, rig: Rig, **kwargs: Any) -> ChainRollout:
    """One skill as a chain of one."""
    return run_chain([skill], rig, **kwargs)


def _env_state(env: Any, skill: LoadedSkill) -> dict[str, np.ndarray]:
    import mujoco

    state = env.named_state()
    for name in _needs(skill):
        site = env.rig.jacobian_sites[name.removesuffix("_jac")]
        jacp = np.zeros((3, env.model.nv))
        mujoco.mj_jacSite(env.model, env.data, jacp, None, site)
        state[name] = jacp[None]
    return state


def _reference_skill(env: Any, skill: LoadedSkill, seg: _Segment, i: int, state: dict, r: _Streams, *, gamma: float,
                     before: int = 0) -> None:
    """One skill's turn in episode ``i`` of the plain loop, from the accepted state ``state`` (``before``: steps run so far)."""
    rig, row = env.rig, np.array([i])
    for t in range(skill.max_steps):
        draws = r.noise.draw(row) if r.noise is not None else None
        sensed = state if r.streams is None else r.streams.sense(state, row, _inputs(skill))
        action = skill.controller.act(sensed, np.full(1, t * rig.dt), noise=draws)
        seg.commanded(row, np.asarray(action, dtype=np.float64), t)
        if r.streams is not None:
            action = r.streams.command(action, row)
        _, reward, _, _, _ = env.step(action[0])
        after = _env_state(env, skill)
        seg.reward[i] += reward
        seg.discounted[i] += gamma**t * reward
        seg.steps[i] += 1
        seg.observe(row, after)
        u = r.stop_draws.draw(row) if r.stop_draws is not None and skill.learned_stop is not None else None
        terminated, stopped, timed_out = _classify(skill, rig, after, t + 1, u, np.array([before + t + 1]))
        if terminated[0] or stopped[0] or timed_out[0]:
            seg.reason[i] = int(EndReason.ENV_ENDED if terminated[0] else EndReason.STOPPED if stopped[0] else EndReason.TIMED_OUT)
            return
        state = after


def reference_run_chain(
    skills: Sequence[LoadedSkill],
    rig: Rig,
    *,
    starts: tuple[np.ndarray, np.ndarray],
    seed: int,
    gamma: float = 0.99,
    explore: bool = False,
    disturbances: Disturbances | None = None,
    episode_ids: np.ndarray | None = None,
    may_time_out: Sequence[bool] | None = None,
) -> ChainRollout:
    """The plain loop: one RigEnv per episode, one skill step at a time.

    Slow and obvious on purpose; the batched ``run_chain`` must match it.
    """
    from kinetome.envs.rig_env import RigEnv

    qpos0, qvel0 = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n = qpos0.shape[0]
    r = _setup(skills, rig, n, seed=seed, explore=explore, disturbances=disturbances, episode_ids=episode_ids, may_time_out=may_time_out)
    segs = [_Segment(n) for _ in skills]
    starts_rows: list[list[dict]] = [[] for _ in skills]
    ends_rows: list[list[dict]] = [[] for _ in skills]
    env = RigEnv(rig)
    for i in range(n):
        env.set_state(qpos0[i], qvel0[i])
        go_on = True
        for k, skill in enumerate(skills):
            start = env.named_state()
            starts_rows[k].append(start)
            seg = segs[k]
            if go_on:
                state = _env_state(env, skill)
                if not skill.starts_when.evaluate({**skill.parameters, **state})[0]:
                    seg.reason[i] = int(EndReason.REFUSED)
                else:
                    before = sum(int(segs[j].steps[i]) for j in range(k))
                    _reference_skill(env, skill, seg, i, state, r, gamma=gamma, before=before)
            ends_rows[k].append(env.named_state())
            go_on = go_on and bool(_hands_on(seg.reason[i : i + 1], r.flags[k])[0])
    records = []
    for k, skill in enumerate(skills):
        start = {name: np.concatenate([r[name] for r in starts_rows[k]]) for name in starts_rows[k][0]}
        end = {name: np.concatenate([r[name] for r in ends_rows[k]]) for name in ends_rows[k][0]}
        records.append(segs[k].record(skill.ref, start, end, gamma))
    return ChainRollout(env_id=rig.env_id, seed=seed, gamma=gamma, segments=tuple(records), meta={"reference": True}, episode_ids=r.ids)

"""Execute skills and chains as options, call-and-return, on batched simulations.

Each skill of a chain starts where the previous one ended (after it stopped
or timed out), refuses when its ``starts_when`` is false, then acts until
``stops_when`` holds, ``max_steps`` pass, or the env terminates. The batched
path makes one controller call and one predicate evaluation per step for all
running episodes; ``reference_run_chain`` does the same one env at a time
through ``RigEnv`` and must give identical records.
"""

from __future__ import annotations

from typing import Any, Callable, Sequence

import numpy as np

from kinetome.envs.named_state import take_states
from kinetome.envs.rig import Rig

from .learned import StopDraws
from .records import ChainRollout, EndReason, SegmentRecord
from .seeding import ExplorationNoise
from .sim import SimBatch, _qpos_of
from .skill import LoadedSkill

__all__ = ["run_chain", "run_skill", "reference_run_chain", "Progress"]

# progress(done, total): done/total in env steps of the longest possible run
Progress = Callable[[int, int], None]



def _needs(skill: LoadedSkill) -> tuple[str, ...]:
    return tuple(getattr(skill.controller, "needs", ()) or ())


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

    def observe(self, rows: np.ndarray, after: dict[str, np.ndarray]) -> None:
        """Track the largest speed/torque each episode reached (for the limits lint)."""
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
        )


def _classify(
    skill: LoadedSkill, rig: Rig, after: dict, t_next: int, u: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(terminated, stopped, timed_out) masks after a step; terminated wins over stopped, stopped over timed out.

    A skill with a learned stop stops as its stop mode says, deciding with the uniform draws ``u``.
    """
    terminated = np.asarray(rig.terminated(after), dtype=bool)
    stopped = skill.stops_when.evaluate({**skill.parameters, **after})
    if skill.learned_stop is not None:
        timeout = np.full(len(stopped), t_next >= skill.max_steps)
        stopped = skill.learned_stop.decide(stopped, timeout, skill.learned_stop.probability(rig, after), u)
    stopped = stopped & ~terminated
    timed_out = ~terminated & ~stopped & (t_next >= skill.max_steps)
    return terminated, stopped, timed_out


def _stop_draws(skills: Sequence[LoadedSkill], seed: int, n: int) -> StopDraws | None:
    return StopDraws(seed, n) if any(s.learned_stop is not None for s in skills) else None


def _run_segment(
    skill: LoadedSkill,
    sim: SimBatch,
    offered: np.ndarray,
    seg: _Segment,
    *,
    gamma: float,
    noise: ExplorationNoise | None,
    stop_draws: StopDraws | None,
    tracer: "_Tracer | None",
    index: int,
    progress: Progress | None,
) -> None:
    rig = sim.rig
    needs = _needs(skill)
    if offered.size == 0:
        return
    start = sim.state(offered, extra=needs)
    accepted = skill.starts_when.evaluate({**skill.parameters, **start})
    seg.reason[offered[~accepted]] = int(EndReason.REFUSED)
    running = offered[accepted]
    state = take_states(start, accepted)
    for t in range(skill.max_steps):
        if running.size == 0:
            break
        draws = noise.draw(running) if noise is not None else None
        action = skill.controller.act(state, np.full(running.size, t * rig.dt), noise=draws)
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
        terminated, stopped, timed_out = _classify(skill, rig, after, t + 1, u)
        seg.reason[running[terminated]] = int(EndReason.TERMINATED)
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
) -> ChainRollout:
    """Run ``skills`` call-and-return from each start state; one batch for all episodes."""
    if not skills:
        raise ValueError("a chain needs at least one skill")
    qpos0, qvel0 = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n = qpos0.shape[0]
    sim = SimBatch(rig, n, nthread=workers)
    sim.reset(qpos0, qvel0)
    noise = ExplorationNoise(seed, n, rig.n_act) if explore else None
    stop_draws = _stop_draws(skills, seed, n)
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
                skill, sim, offered, seg, gamma=gamma, noise=noise, stop_draws=stop_draws, tracer=tracer, index=index,
                progress=segment_progress,
            )
            done_before += int(skill.max_steps)
            if progress is not None:
                progress(done_before, longest)
            records.append(seg.record(skill.ref, start, sim.state(), gamma))
            offered = np.flatnonzero((seg.reason == int(EndReason.STOPPED)) | (seg.reason == int(EndReason.TIMED_OUT)))
    qpos_trace, seg_trace = tracer.arrays(rig.model.nq) if tracer is not None else (None, None)
    return ChainRollout(
        env_id=rig.env_id,
        seed=seed,
        gamma=gamma,
        segments=tuple(records),
        qpos_trace=qpos_trace,
        segment_of_step=seg_trace,
        meta={"workers": workers, "explore": explore},
    )


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


def reference_run_chain(
    skills: Sequence[LoadedSkill],
    rig: Rig,
    *,
    starts: tuple[np.ndarray, np.ndarray],
    seed: int,
    gamma: float = 0.99,
    explore: bool = False,
) -> ChainRollout:
    """The plain loop: one RigEnv per episode, one skill step at a time.

    Slow and obvious on purpose; the batched ``run_chain`` must match it.
    """
    from kinetome.envs.rig_env import RigEnv

    qpos0, qvel0 = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n = qpos0.shape[0]
    noise = ExplorationNoise(seed, n, rig.n_act) if explore else None
    stop_draws = _stop_draws(skills, seed, n)
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
                    for t in range(skill.max_steps):
                        draws = noise.draw(np.array([i])) if noise is not None else None
                        action = skill.controller.act(state, np.full(1, t * rig.dt), noise=draws)
                        _, reward, _, _, _ = env.step(action[0])
                        after = _env_state(env, skill)
                        seg.reward[i] += reward
                        seg.discounted[i] += gamma**t * reward
                        seg.steps[i] += 1
                        seg.observe(np.array([i]), after)
                        u = stop_draws.draw(np.array([i])) if stop_draws is not None and skill.learned_stop is not None else None
                        terminated, stopped, timed_out = _classify(skill, rig, after, t + 1, u)
                        if terminated[0] or stopped[0] or timed_out[0]:
                            seg.reason[i] = int(EndReason.TERMINATED if terminated[0] else EndReason.STOPPED if stopped[0] else EndReason.TIMED_OUT)
                            break
                        state = after
            ends_rows[k].append(env.named_state())
            go_on = go_on and seg.reason[i] in (int(EndReason.STOPPED), int(EndReason.TIMED_OUT))
    records = []
    for k, skill in enumerate(skills):
        start = {name: np.concatenate([r[name] for r in starts_rows[k]]) for name in starts_rows[k][0]}
        end = {name: np.concatenate([r[name] for r in ends_rows[k]]) for name in ends_rows[k][0]}
        records.append(segs[k].record(skill.ref, start, end, gamma))
    return ChainRollout(env_id=rig.env_id, seed=seed, gamma=gamma, segments=tuple(records), meta={"reference": True})

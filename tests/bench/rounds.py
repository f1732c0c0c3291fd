"""Helpers for benchmarks on a noisy shared machine: interleaved rounds and the machine's own parallel ceiling.

Not a benchmark itself (imported by bench_scaleout.py and bench_runtime.py).

On a shared 2-vCPU host one core's speed drifts by tens of percent from minute to
minute, so two configurations timed a minute apart cannot be compared. ``run_rounds``
times every configuration once per round, in an order rotated from round to round,
and ratios are taken inside a round (both sides under the same conditions) and then
summarised over rounds as median and min-max.

``RawSimulator`` is the ceiling: the raw simulator (``mujoco.rollout`` on one thread,
zero controls) in one OS process, and in two OS processes at once. Two processes'
throughput over one's is what this machine gives two independent jobs right now;
no scale-out of ours can beat it in the same round.
"""

from __future__ import annotations

import multiprocessing
import os
import statistics
import time
from typing import Callable

import numpy as np

THREAD_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}


def load() -> str:
    """The 1-, 5- and 15-minute load averages, e.g. '1.02 / 0.85 / 0.60'."""
    return " / ".join(f"{x:.2f}" for x in os.getloadavg())


def run_rounds(configs: dict[str, Callable[[], float]], rounds: int, *, on_round: Callable[[int, dict], None] | None = None) -> list[dict[str, float]]:
    """Time every configuration once per round, the order rotated by one each round.

    Each callable returns its own measure (seconds, or a rate); the result is one dict per round.
    ``on_round(r, measures)`` is called after each round (e.g. to print progress).
    """
    names = list(configs)
    out = []
    for r in range(rounds):
        k = r % len(names)
        measures = {name: configs[name]() for name in names[k:] + names[:k]}
        out.append(measures)
        if on_round is not None:
            on_round(r, measures)
    return out


def summary(values: list[float], fmt: str = "{:.2f}") -> str:
    """'median [min-max]' of ``values``."""
    return f"{fmt.format(statistics.median(values))} [{fmt.format(min(values))}-{fmt.format(max(values))}]"


def median(values: list[float]) -> float:
    return float(statistics.median(values))


def column(runs: list[dict[str, float]], key: str) -> list[float]:
    """One configuration's measure in every round."""
    return [m[key] for m in runs]


def ratios(runs: list[dict[str, float]], num: str, den: str) -> list[float]:
    """``num`` over ``den`` inside each round (both measured under the same conditions)."""
    return [m[num] / m[den] for m in runs]


def load_line(before: str, per_round: list[float]) -> str:
    """The load averages before and after, and the 1-minute one after each round, for a report's header."""
    return (f"1-min / 5-min / 15-min load average {before} before, {load()} after; per round (1-min) "
            f"{', '.join(f'{x:.2f}' for x in per_round)}; {os.cpu_count()} CPUs")


# --- the ceiling: the raw simulator in one and in two OS processes --------------------------------------------------

_MODEL = None


def _prepare(env_id: str) -> None:
    """Pool initialiser: one thread per library, the env's model compiled once per process."""
    global _MODEL
    os.environ.update(THREAD_ENV)
    import mujoco  # noqa: F401

    from kinetome.envs import make_rig

    _MODEL = make_rig(env_id).model


def rollout_states(model, qpos: np.ndarray, qvel: np.ndarray) -> np.ndarray:
    """(rows, state size) full physics states of the rows of (qpos, qvel), as ``mujoco.rollout`` takes them."""
    import mujoco

    data = mujoco.MjData(model)
    spec = mujoco.mjtState.mjSTATE_FULLPHYSICS
    state = np.zeros((qpos.shape[0], mujoco.mj_stateSize(model, spec)))
    for i in range(qpos.shape[0]):
        mujoco.mj_resetData(model, data)
        data.qpos[:], data.qvel[:] = qpos[i], qvel[i]
        mujoco.mj_forward(model, data)
        mujoco.mj_getState(model, data, state[i], spec)
    return state


def rollout_seconds(model, state: np.ndarray, nstep: int, nthread: int = 1, *, warm: bool = False) -> float:
    """Seconds of ``mujoco.rollout`` open loop (zero controls) from ``state``, ``nstep`` physics steps per row,
    on ``nthread`` threads (1: the caller's thread only); ``warm``: a short untimed rollout first."""
    import mujoco
    from mujoco import rollout

    datas = [mujoco.MjData(model) for _ in range(max(1, nthread))]
    control = np.zeros((state.shape[0], nstep, model.nu))
    with rollout.Rollout(nthread=0 if nthread == 1 else nthread) as r:
        if warm:
            r.rollout(model, datas, state, control[:, :5])
        t = time.perf_counter()
        r.rollout(model, datas, state, control)
        return time.perf_counter() - t


def _raw_steps(physics_steps: int) -> tuple[int, float]:
    """(pid, seconds) for ``physics_steps`` physics steps of the model, 16 states at once, one thread."""
    model, batch = _MODEL, 16
    state = rollout_states(model, np.tile(model.qpos0, (batch, 1)), np.zeros((batch, model.nv)))
    return os.getpid(), rollout_seconds(model, state, max(1, physics_steps // batch))


class RawSimulator:
    """Two warm OS processes (spawned, not forked) that run the raw simulator on ``env_id``'s model."""

    def __init__(self, env_id: str, seconds: float = 1.0):
        self._pool = multiprocessing.get_context("spawn").Pool(2, initializer=_prepare, initargs=(env_id,))
        self._pool.map(_raw_steps, [1600, 1600], chunksize=1)  # both processes up and warm
        _, t = self._pool.apply(_raw_steps, (16_000,))
        self.steps = int(16_000 * seconds / max(t, 1e-6))  # about ``seconds`` of work per process on a free core

    def one(self) -> float:
        """Physics steps/s of one process alone."""
        t = time.perf_counter()
        self._pool.apply(_raw_steps, (self.steps,))
        return self.steps / (time.perf_counter() - t)

    def two(self) -> float:
        """Physics steps/s of two processes at once (both finish inside the timed span)."""
        for _ in range(3):
            t = time.perf_counter()
            done = self._pool.map(_raw_steps, [self.steps, self.steps], chunksize=1)
            wall = time.perf_counter() - t
            if done[0][0] != done[1][0]:
                return 2 * self.steps / wall
        raise RuntimeError("the pool ran both raw-simulator jobs in one process three times")

    def close(self) -> None:
        self._pool.terminate()
        self._pool.join()

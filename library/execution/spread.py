"""Run a chain's episodes wherever the user asked: one batch here, or blocks on Ray workers.

``run_chain_spread`` is what ``run``, ``fit`` and the checker call. In this process it
is one ``run_chain`` over every episode (``threads`` MuJoCo threads); with workers it
is the same episodes as blocks, concatenated in block order. Per-episode random
streams make both the same bits.
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from ..errors import InvalidInputError
from .blocks import DEFAULT_BLOCK_SIZE, plan_blocks
from .chain_blocks import chain_job, run_chain_blocks
from .executors import InProcessExecutor, executor_for

__all__ = ["run_chain_spread", "check_threads"]


def check_threads(threads: int, workers: int | None, address: str | None) -> None:
    """``threads`` is for one process; worker processes run one thread each, so asking for both is refused."""
    if isinstance(threads, bool) or not isinstance(threads, int) or threads < 1:
        raise InvalidInputError(f"--threads must be a whole number >= 1, got {threads!r}")
    if threads > 1 and (address is not None or (workers or 1) > 1):
        raise InvalidInputError(
            f"--threads {threads} applies to a run in this process; with --workers or --address each worker process "
            "runs one thread: drop --threads, or drop --workers/--address"
        )


def run_chain_spread(
    skills: Sequence[Any],
    rig: Any,
    *,
    starts: tuple[np.ndarray, np.ndarray],
    seed: int,
    workers: int | None = None,
    address: str | None = None,
    threads: int = 1,
    block_size: int = DEFAULT_BLOCK_SIZE,
    progress: Any = None,
    built_for: Sequence[str] | None = None,
    **run_options: Any,
) -> Any:
    """``run_chain(skills, rig, starts=..., seed=..., **run_options)`` on this process or on workers, same result.

    ``run_options``: gamma, explore, disturbances, may_time_out (as ``run_chain``).
    ``progress(done, total)`` counts env steps of the longest possible run, as ``run_chain`` does.
    """
    from ..runtime.execute import run_chain
    from ..runtime.records import ChainRollout

    check_threads(threads, workers, address)
    executor = executor_for(workers, address)
    if isinstance(executor, InProcessExecutor):
        return run_chain(skills, rig, starts=starts, seed=seed, workers=threads, progress=progress, **run_options)
    qpos, qvel = (np.atleast_2d(np.asarray(a, dtype=np.float64)) for a in starts)
    n = qpos.shape[0]
    job = chain_job(skills, rig, seed=seed, built_for=built_for, threads=1, **run_options)
    longest = sum(int(s.max_steps) for s in skills)
    parts: list[Any] = []
    try:
        for part in run_chain_blocks(executor, job, plan_blocks(n, block_size), lambda b: (qpos[b.first : b.stop], qvel[b.first : b.stop])):
            parts.append(part)
            if progress is not None:
                progress(longest * sum(p.n_episodes for p in parts) // n, longest)
    finally:
        executor.close()
    return ChainRollout.concatenate(parts)

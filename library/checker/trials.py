"""What each simulated episode says about each handoff, and how many distinct trajectories there are.

Pure numpy. Index 0 is the entry (initial state -> first skill); index j >= 1
is the handoff from skill j-1 (A) to skill j (B). Per episode:

- ``reached[:, j]``: the handoff was tried (entry: always; handoff: A ran);
- ``handed[:, j]``: it handed over (entry: the first skill accepted; handoff: A
  ended by its stop condition, or timed out where the chain allows it, and B's
  ``starts_when`` held there);
- ``chain``: the whole chain succeeded (every handoff handed over and the last
  skill stopped, or timed out where allowed);
- ``signature``: the episode's handoff states (initial state and every skill's
  end state) on a grid of ``TRAJECTORY_TOLERANCE``: episodes with equal
  signatures are one trajectory.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Sequence

import numpy as np

__all__ = ["Trials", "trials_from_rollout", "TRAJECTORY_TOLERANCE", "distinct_rows"]

TRAJECTORY_TOLERANCE = 1e-12  # episodes whose handoff states agree on this grid count as one (round-off level)


@dataclass(frozen=True, eq=False)
class Trials:
    """Per-episode outcomes (rows in block order) of one chain."""

    reached: np.ndarray  # (n, m) bool
    handed: np.ndarray  # (n, m) bool
    chain: np.ndarray  # (n,) bool
    signature: tuple[bytes, ...]  # (n,)

    @property
    def n(self) -> int:
        return int(self.chain.shape[0])

    @property
    def m(self) -> int:
        return int(self.handed.shape[1])

    def prefix(self) -> np.ndarray:
        """(n, m) bool: the episode handed over at every handoff (entry included) up to and including j."""
        return np.logical_and.accumulate(self.handed, axis=1) if self.n else self.handed.copy()

    def take(self, rows: np.ndarray) -> "Trials":
        rows = np.asarray(rows, dtype=np.int64)
        return Trials(self.reached[rows], self.handed[rows], self.chain[rows], tuple(self.signature[int(i)] for i in rows))

    @staticmethod
    def concatenate(parts: Sequence["Trials"]) -> "Trials":
        parts = [p for p in parts if p.n]
        if not parts:
            raise ValueError("no trials to concatenate")
        return Trials(
            np.concatenate([p.reached for p in parts]),
            np.concatenate([p.handed for p in parts]),
            np.concatenate([p.chain for p in parts]),
            tuple(s for p in parts for s in p.signature),
        )


def distinct_rows(signature: Sequence[bytes]) -> np.ndarray:
    """Row indices of the first episode of each distinct trajectory, in order."""
    seen: set[bytes] = set()
    keep = []
    for i, s in enumerate(signature):
        if s not in seen:
            seen.add(s)
            keep.append(i)
    return np.asarray(keep, dtype=np.int64)


def _signatures(rollout: Any, tolerance: float) -> tuple[bytes, ...]:
    parts = [rollout.segments[0].start_state] + [seg.end_state for seg in rollout.segments]
    columns = []
    for state in parts:
        for name in sorted(state):
            if name.endswith("_jac"):
                continue
            value = np.asarray(state[name], dtype=np.float64)
            columns.append(value.reshape(value.shape[0], -1))
    grid = np.round(np.concatenate(columns, axis=1) / tolerance)
    grid = np.where(np.isfinite(grid), grid, 0.0).astype(np.int64)
    return tuple(row.tobytes() for row in grid)


def trials_from_rollout(rollout: Any, may_time_out: Sequence[bool], *, tolerance: float = TRAJECTORY_TOLERANCE) -> Trials:
    """The per-episode outcomes of a ChainRollout run with these ``may_time_out`` flags."""
    from ..runtime.records import EndReason

    segs = rollout.segments
    n, m = rollout.n_episodes, len(segs)
    ran = {int(EndReason.STOPPED), int(EndReason.TIMED_OUT), int(EndReason.ENV_ENDED)}
    reached = np.zeros((n, m), dtype=bool)
    handed = np.zeros((n, m), dtype=bool)
    ended_well = []
    for i, seg in enumerate(segs):
        ok = seg.reason == int(EndReason.STOPPED)
        if may_time_out[i]:
            ok = ok | (seg.reason == int(EndReason.TIMED_OUT))
        ended_well.append(ok)
    reached[:, 0] = True
    handed[:, 0] = segs[0].reason != int(EndReason.REFUSED)
    for j in range(1, m):
        a, b = segs[j - 1], segs[j]
        reached[:, j] = np.isin(a.reason, list(ran))
        handed[:, j] = ended_well[j - 1] & (b.reason != int(EndReason.REFUSED)) & (b.reason != int(EndReason.NOT_REACHED))
    chain = np.logical_and.reduce(handed, axis=1) & ended_well[-1]
    return Trials(reached, handed, chain, _signatures(rollout, tolerance))

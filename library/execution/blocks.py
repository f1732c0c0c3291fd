"""Episode blocks: how a run of many episodes is cut up, independent of who runs the pieces.

A block is a run of consecutive episode ids. Its random stream comes from (base seed,
block index) alone, and every episode inside it keeps its own per-episode streams
(``runtime/seeding.py``), so the contents of a block never depend on the number of
workers, the order blocks finish in, or which machine ran them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Block", "plan_blocks", "block_counts", "DEFAULT_BLOCK_SIZE"]

DEFAULT_BLOCK_SIZE = 256  # episodes per block: one MuJoCo batch per block (the checker's block too)

# stream number of block-level draws, distinct from the per-episode streams (7, 11, 13, 17) and starts (3)
_BLOCK_STREAM = 23


@dataclass(frozen=True)
class Block:
    """Episodes ``first`` .. ``first + count - 1``, the ``index``-th block of a plan."""

    index: int
    first: int
    count: int

    def __post_init__(self) -> None:
        for name in ("index", "first", "count"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
                raise ValueError(f"block {name} must be a whole number, got {value!r}")
        if self.index < 0 or self.first < 0:
            raise ValueError(f"block index and first episode must be >= 0, got index {self.index}, first {self.first}")
        if self.count < 1:
            raise ValueError(f"block count must be >= 1, got {self.count}")

    @property
    def stop(self) -> int:
        """One past the last episode id."""
        return self.first + self.count

    @property
    def episode_ids(self) -> np.ndarray:
        """(count,) int64 global episode ids of the block's rows."""
        return np.arange(self.first, self.stop, dtype=np.int64)

    def seed_sequence(self, seed: int, *stream: int) -> np.random.SeedSequence:
        """The block's own seed sequence: spawn key (block index, *stream) under the base ``seed``."""
        return np.random.SeedSequence(int(seed), spawn_key=(_BLOCK_STREAM, int(self.index), *(int(s) for s in stream)))

    def rng(self, seed: int, *stream: int) -> np.random.Generator:
        """A generator for block-level draws (e.g. a sweep's grid point per block)."""
        return np.random.default_rng(self.seed_sequence(seed, *stream))

    def to_dict(self) -> dict[str, int]:
        """Plain data for a worker."""
        return {"index": int(self.index), "first": int(self.first), "count": int(self.count)}

    @classmethod
    def from_dict(cls, data: dict) -> "Block":
        return cls(int(data["index"]), int(data["first"]), int(data["count"]))


def plan_blocks(episodes: int, block_size: int = DEFAULT_BLOCK_SIZE, *, first: int = 0) -> list[Block]:
    """Episodes ``first`` .. ``first + episodes - 1`` as consecutive blocks of at most ``block_size``, as even as possible.

    The plan depends only on these numbers: never on how many workers will run it.
    """
    if isinstance(episodes, bool) or not isinstance(episodes, (int, np.integer)) or episodes < 1:
        raise ValueError(f"episodes must be a whole number >= 1, got {episodes!r}")
    if isinstance(block_size, bool) or not isinstance(block_size, (int, np.integer)) or block_size < 1:
        raise ValueError(f"block size must be a whole number >= 1, got {block_size!r}")
    blocks, a = [], first
    for i, count in enumerate(block_counts(episodes, block_size)):
        blocks.append(Block(i, a, count))
        a += count
    return blocks


def block_counts(episodes: int, block_size: int) -> list[int]:
    """Episodes per block: the fewest blocks of at most ``block_size``, sizes differing by at most one.

    Even blocks finish together: 1,000 episodes at 256 are 4 x 250, not 3 x 256 + 232, whose short
    last block would leave a worker idle while the others finish theirs.
    """
    k = -(-episodes // block_size)
    q, r = divmod(episodes, k)
    return [q + 1] * r + [q] * (k - r)

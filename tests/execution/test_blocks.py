"""Episode blocks: cut from the episode count alone, with their own random streams."""

from __future__ import annotations

import numpy as np
import pytest

from kinetome.library.execution import Block, plan_blocks


@pytest.mark.parametrize("episodes,size", [(1, 256), (1000, 256), (512, 256), (7, 3), (10, 1)])
def test_blocks_cover_every_episode_once_in_order(episodes, size) -> None:
    blocks = plan_blocks(episodes, size)
    ids = np.concatenate([b.episode_ids for b in blocks])
    np.testing.assert_array_equal(ids, np.arange(episodes))
    assert [b.index for b in blocks] == list(range(len(blocks)))
    assert len(blocks) == -(-episodes // size)  # the fewest blocks of at most ``size``
    counts = [b.count for b in blocks]
    assert max(counts) <= size and max(counts) - min(counts) <= 1  # even: blocks on workers finish together


def test_blocks_are_even_not_a_short_last_one() -> None:
    assert [b.count for b in plan_blocks(1000, 256)] == [250, 250, 250, 250]
    assert [b.count for b in plan_blocks(7, 3)] == [3, 2, 2]


def test_first_offsets_the_episode_ids() -> None:
    blocks = plan_blocks(5, 2, first=59)
    assert [(b.first, b.stop) for b in blocks] == [(59, 61), (61, 63), (63, 64)]
    assert [(b.first, b.stop) for b in plan_blocks(6, 4, first=59)] == [(59, 62), (62, 65)]


def test_block_streams_are_reproducible_and_distinct() -> None:
    a, b = plan_blocks(20, 10)
    assert a.rng(7).integers(1 << 62) == Block(0, 0, 10).rng(7).integers(1 << 62)
    assert a.rng(7).integers(1 << 62) != b.rng(7).integers(1 << 62)  # other block
    assert a.rng(7).integers(1 << 62) != a.rng(8).integers(1 << 62)  # other base seed
    assert a.rng(7, 1).integers(1 << 62) != a.rng(7, 2).integers(1 << 62)  # other stream


def test_block_round_trips_as_plain_data() -> None:
    b = Block(3, 768, 232)
    assert Block.from_dict(b.to_dict()) == b
    assert all(type(v) is int for v in b.to_dict().values())


@pytest.mark.parametrize(
    "call,message",
    [
        (lambda: plan_blocks(0, 10), "episodes must be a whole number >= 1, got 0"),
        (lambda: plan_blocks(10, 0), "block size must be a whole number >= 1, got 0"),
        (lambda: plan_blocks(10, True), "block size must be a whole number >= 1, got True"),
        (lambda: Block(0, 0, 0), "block count must be >= 1, got 0"),
        (lambda: Block(-1, 0, 3), "must be >= 0, got index -1"),
        (lambda: Block(0, 0.5, 3), "block first must be a whole number, got 0.5"),
    ],
)
def test_bad_blocks_are_refused(call, message) -> None:
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")):
        call()

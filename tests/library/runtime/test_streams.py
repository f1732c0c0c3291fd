"""Per-episode streams read batch-wide give exactly the values of one generator call per episode per step."""

from __future__ import annotations

import numpy as np
import pytest

from kinetome.library.runtime.seeding import episode_rng
from kinetome.library.runtime.streams import EpisodeStreams


@pytest.mark.parametrize("kind", ["normal", "uniform"])
def test_batch_reads_equal_one_call_per_episode_per_step(kind) -> None:
    # Reference: the obvious loop, one generator call per running episode per step (as before the buffers).
    seed, ids, stream = 5, [3, 10, 11, 40], 13
    rngs = [episode_rng(seed, i, stream) for i in ids]
    streams = EpisodeStreams(seed, ids, stream, kind=kind, chunk=16)
    pick = np.random.default_rng(0)
    for step in range(200):
        rows = np.flatnonzero(pick.random(len(ids)) < 0.7)  # episodes still running this step
        width = int(pick.integers(1, 40))  # wider than the buffer now and then: it grows
        want = np.array([(r.standard_normal(width) if kind == "normal" else r.random(width)) for r in (rngs[i] for i in rows)])
        got = streams.take(rows, width)
        assert got.shape == (rows.size, width)
        np.testing.assert_array_equal(got, want.reshape(rows.size, width), err_msg=f"step {step}")


def test_no_rows_and_bad_kind() -> None:
    assert EpisodeStreams(0, [0, 1], 7).take(np.array([], dtype=np.int64), 3).shape == (0, 3)
    with pytest.raises(ValueError, match="kind must be normal or uniform, got 'gamma'"):
        EpisodeStreams(0, [0], 7, kind="gamma")

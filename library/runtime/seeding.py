"""Per-episode random streams, so results do not depend on batch size or workers."""

from __future__ import annotations

import numpy as np

__all__ = ["episode_rng", "ExplorationNoise"]


def episode_rng(seed: int, episode: int, stream: int = 0) -> np.random.Generator:
    """The generator of one episode: ``default_rng([seed, episode, stream])``."""
    return np.random.default_rng([int(seed), int(episode), int(stream)])


class ExplorationNoise:
    """Standard-normal action noise, one independent stream per episode."""

    _STREAM = 7  # distinct from start sampling streams

    def __init__(self, seed: int, n_episodes: int, n_act: int, *, episode_ids: np.ndarray | None = None):
        from .streams import EpisodeStreams

        ids = range(n_episodes) if episode_ids is None else [int(i) for i in episode_ids]
        self._streams = EpisodeStreams(seed, ids, self._STREAM, kind="normal")
        self._n_act = n_act

    def draw(self, episodes: np.ndarray) -> np.ndarray:
        """(len(episodes), n_act) noise; each row advances only its own stream (read batch-wide).

        ``episodes`` are batch rows; with ``episode_ids`` row i draws from episode ``episode_ids[i]``'s stream.
        """
        return self._streams.take(episodes, self._n_act)

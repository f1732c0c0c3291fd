"""Stochastic episodes: exploration noise, sensor noise, action delay and actuator-gain spread.

``Disturbances`` is the value a chain file's ``disturbances:`` mapping becomes;
``DisturbanceStreams`` applies it to a batch of episodes. Every random draw comes
from the episode's own stream (``seeding.episode_rng``), so an episode behaves
the same whatever batch, block or worker runs it.

- ``exploration``: the controller's Gaussian exploration head (``exploration_std``)
  instead of its mean action.
- ``sensor_noise``: Gaussian noise of this standard deviation (in each quantity's
  own unit) added to every named quantity the controller reads, every step.
  Predicates (``starts_when``, ``stops_when``) read the true state.
- ``action_delay_steps``: the command computed at step t is applied at step t + k;
  the first k steps of an episode repeat its first command. The buffer carries
  over from one skill to the next, as a real command pipeline would.
- ``gain_spread``: each actuator's command is multiplied by a factor drawn once
  per episode, uniformly from [1 - s, 1 + s], before clipping to the actuator's
  range (for torque motors this is an actuator-gain change that saturates at the
  range).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from .seeding import episode_rng
from .streams import EpisodeStreams

__all__ = ["Disturbances", "DisturbanceStreams", "NO_DISTURBANCES"]

_SENSOR_STREAM = 13  # distinct from starts (0), exploration (7), learned stops (11)
_GAIN_STREAM = 17


@dataclass(frozen=True)
class Disturbances:
    """What makes episodes differ beyond their initial states; all off by default."""

    exploration: bool = False
    sensor_noise: float = 0.0
    action_delay_steps: int = 0
    gain_spread: float = 0.0

    def __post_init__(self) -> None:
        problems = self.problems()
        if problems:
            raise ValueError("; ".join(f"{field} {message}" for field, message, _ in problems))

    def problems(self) -> list[tuple[str, str, str]]:
        """(field, what is wrong, fix) for each bad value."""
        out = []
        if not isinstance(self.exploration, bool):
            out.append(("exploration", f"must be true or false, got {self.exploration!r}", "write exploration: true"))
        s = self.sensor_noise
        if isinstance(s, bool) or not isinstance(s, (int, float)) or not math.isfinite(s) or s < 0:
            out.append(("sensor_noise", f"must be a number >= 0 (a standard deviation), got {s!r}", "write e.g. sensor_noise: 0.01"))
        k = self.action_delay_steps
        if isinstance(k, bool) or not isinstance(k, int) or k < 0:
            out.append(("action_delay_steps", f"must be a whole number >= 0, got {k!r}", "write e.g. action_delay_steps: 2"))
        g = self.gain_spread
        if isinstance(g, bool) or not isinstance(g, (int, float)) or not math.isfinite(g) or not 0 <= g < 1:
            out.append(("gain_spread", f"must be a number in [0, 1), got {g!r}", "write e.g. gain_spread: 0.1 for +-10%"))
        return out

    @property
    def stochastic(self) -> bool:
        """True when episodes from one initial state can differ."""
        return self.exploration or self.sensor_noise > 0 or self.gain_spread > 0

    @property
    def active(self) -> bool:
        return self.stochastic or self.action_delay_steps > 0

    def to_dict(self) -> dict[str, Any]:
        return {
            "exploration": self.exploration,
            "sensor_noise": float(self.sensor_noise),
            "action_delay_steps": int(self.action_delay_steps),
            "gain_spread": float(self.gain_spread),
        }

    @classmethod
    def from_mapping(cls, data: Mapping[str, Any]) -> "Disturbances":
        return cls(**dict(data))


NO_DISTURBANCES = Disturbances()


class DisturbanceStreams:
    """Sensor noise, delay buffers and gains for ``n`` episodes with global ids ``episode_ids``."""

    def __init__(self, d: Disturbances, *, seed: int, episode_ids: np.ndarray, n_act: int):
        self.d = d
        self.ids = np.asarray(episode_ids, dtype=np.int64)
        n = self.ids.size
        self._sensor = EpisodeStreams(seed, self.ids, _SENSOR_STREAM) if d.sensor_noise > 0 else None
        if d.gain_spread > 0:
            s = float(d.gain_spread)
            self.gains = np.stack([episode_rng(seed, int(i), _GAIN_STREAM).uniform(1 - s, 1 + s, n_act) for i in self.ids])
        else:
            self.gains = None
        k = int(d.action_delay_steps)
        self._buffer = np.zeros((n, k, n_act)) if k else None
        self._filled = np.zeros(n, dtype=bool)

    def sense(self, state: Mapping[str, np.ndarray], rows: np.ndarray, names: tuple[str, ...]) -> dict[str, np.ndarray]:
        """The state the controller reads: ``names`` with sensor noise (rows = batch-local episodes)."""
        if self._sensor is None or not names or len(rows) == 0:
            return dict(state)
        out = dict(state)
        scale = float(self.d.sensor_noise)
        for name in names:
            if name not in state or name.endswith("_jac"):
                continue
            value = np.asarray(state[name], dtype=np.float64)
            width = int(np.prod(value.shape[1:], dtype=np.int64))
            draws = self._sensor.take(rows, width).reshape(value.shape)
            out[name] = value + scale * draws
        return out

    def command(self, action: np.ndarray, rows: np.ndarray) -> np.ndarray:
        """The command applied this step: delayed, then scaled by each episode's gains."""
        action = np.asarray(action, dtype=np.float64)
        if self._buffer is not None and len(rows):
            fresh = ~self._filled[rows]
            if np.any(fresh):
                self._buffer[rows[fresh]] = action[fresh][:, None, :]
                self._filled[rows[fresh]] = True
            out = self._buffer[rows, 0].copy()
            self._buffer[rows, :-1] = self._buffer[rows, 1:]
            self._buffer[rows, -1] = action
            action = out
        if self.gains is not None and len(rows):
            action = action * self.gains[rows]
        return action

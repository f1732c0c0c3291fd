"""What a rollout records: the samples of one update, per-step endings and episode statistics."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Rollout", "EpisodeStats", "StepEnd", "RolloutBuffer"]


@dataclass
class Rollout:
    """One update's samples, time-major (T, N, ...), plus the bootstrap values (N,)."""

    features: np.ndarray  # (T, N, n_obs) critic inputs (normalised)
    inputs: dict[str, np.ndarray]  # name -> (T, N, *shape) controller inputs
    skill: np.ndarray  # (T, N) int64
    skill_time: np.ndarray  # (T, N) seconds since the skill started
    actions: np.ndarray  # (T, N, n_act) pre-clip samples
    log_prob: np.ndarray  # (T, N)
    values: np.ndarray  # (T, N) Q(s_t, w_t)
    rewards: np.ndarray  # (T, N) scaled, switch cost and truncation bootstrap included
    dones: np.ndarray  # (T, N) bool
    last_values: np.ndarray  # (N,)
    term_features: np.ndarray  # (T, N, n_obs) features of s_{t+1}
    term_weight: np.ndarray  # (T, N) 1 where beta(s_{t+1}, w_t) was a learned decision
    term_advantage: np.ndarray  # (T, N) Q(s_{t+1}, w_t) - V(s_{t+1})
    reward_scale: float = 1.0


@dataclass
class EpisodeStats:
    """What finished during one rollout."""

    returns: list[float] = field(default_factory=list)
    lengths: list[int] = field(default_factory=list)
    successes: list[bool] = field(default_factory=list)
    skill_durations: list[int] = field(default_factory=list)
    skill_steps: int = 0
    terminations: int = 0
    learned_terminations: int = 0
    refusals: int = 0  # options mode: episodes ended because no skill's starts_when held
    skill_counts: np.ndarray | None = None  # (n_skills,) env steps each skill ran

    def summary(self) -> dict[str, float]:
        nan = float("nan")
        return {
            "episodes": len(self.returns),
            "return_mean": float(np.mean(self.returns)) if self.returns else nan,
            "mean_duration": float(np.mean(self.lengths)) if self.lengths else nan,
            "success_rate": float(np.mean(self.successes)) if self.successes else nan,
            "stop_rate": self.terminations / self.skill_steps if self.skill_steps else nan,
            "mean_skill_duration": float(np.mean(self.skill_durations)) if self.skill_durations else nan,
            "refusals": self.refusals,
            "skill_share": (self.skill_counts / self.skill_counts.sum()).tolist()
            if self.skill_counts is not None and self.skill_counts.sum() > 0
            else [],
        }


@dataclass
class StepEnd:
    """How one step ended in each simulation, (N,) arrays.

    ``terminal``: the env ended the episode (or, per skill, the skill
    succeeded; or, in options mode, no skill was available to go on); ``truncated``: a time limit ended it (bootstrapped);
    ``skill_ends``: the running skill's turn is over; ``switched``: a new
    skill is chosen inside the episode; ``reward``: the raw reward with the
    success bonus or switch cost. ``term_*`` feed the termination update.
    """

    terminal: np.ndarray
    truncated: np.ndarray
    skill_ends: np.ndarray
    switched: np.ndarray
    learned_stop: np.ndarray
    reward: np.ndarray
    term_weight: np.ndarray
    term_advantage: np.ndarray
    success: np.ndarray | None = None  # flat mode with a stops_when: the stop held
    feats_after: np.ndarray | None = None  # options mode: features of s_{t+1}
    next_skill: np.ndarray | None = None  # options mode: the skill chosen where one stopped (NO_SKILL: refused)
    refused: np.ndarray | None = None  # options mode: a skill stopped and none was available
    bootstrap: np.ndarray | None = None  # options mode: U(s_{t+1}, w_t), the value a truncation adds

    @property
    def episode_ends(self) -> np.ndarray:
        return self.terminal | self.truncated


class RolloutBuffer:
    """Time-major arrays of one rollout, allocated when the feature width is known."""

    _FIELDS = ("features", "term_features", "skill", "skill_time", "actions", "log_prob", "values",
               "rewards", "dones", "term_weight", "term_advantage")

    def __init__(self, steps: int, n: int, n_act: int, input_shapes: dict[str, tuple[int, ...]]):
        self.steps, self.n, self.n_act = steps, n, n_act
        self.inputs = {name: np.zeros((steps, *shape)) for name, shape in input_shapes.items()}
        self.arrays: dict[str, np.ndarray] = {}

    def _allocate(self, n_obs: int) -> None:
        T, n = self.steps, self.n
        self.arrays = {
            "features": np.zeros((T, n, n_obs)),
            "term_features": np.zeros((T, n, n_obs)),
            "skill": np.zeros((T, n), dtype=np.int64),
            "skill_time": np.zeros((T, n)),
            "actions": np.zeros((T, n, self.n_act)),
            "log_prob": np.zeros((T, n)),
            "values": np.zeros((T, n)),
            "rewards": np.zeros((T, n)),
            "dones": np.zeros((T, n), dtype=bool),
            "term_weight": np.zeros((T, n)),
            "term_advantage": np.zeros((T, n)),
        }

    def store(self, t: int, *, state: dict[str, np.ndarray], end: StepEnd, **values: np.ndarray) -> None:
        """Row ``t``: the controller inputs read from ``state``, ``values`` by field, and the step's ending."""
        if not self.arrays:
            self._allocate(values["features"].shape[1])
        for name, buf in self.inputs.items():
            buf[t] = state[name]
        for name, value in values.items():
            self.arrays[name][t] = value
        if end.feats_after is not None:
            self.arrays["term_features"][t] = end.feats_after
        self.arrays["dones"][t] = end.episode_ends
        self.arrays["term_weight"][t] = end.term_weight
        self.arrays["term_advantage"][t] = end.term_advantage

    def rollout(self, last_values: np.ndarray, *, reward_scale: float) -> Rollout:
        return Rollout(inputs=self.inputs, last_values=last_values, reward_scale=reward_scale,
                       **{name: self.arrays[name] for name in self._FIELDS})

"""Reward model of an option: expected discounted return of the task reward, per start state."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from .features import FeatureMap
from .heads import LinearHead
from .serial import file_error, pack, unpack

__all__ = ["RewardModel", "REWARD_OUTPUTS"]

# discounted_return: E[sum_{t<k} gamma^t r_t] (the option's R^o);  reward: E[sum_{t<k} r_t]
REWARD_OUTPUTS = ("discounted_return", "reward")


@dataclass(frozen=True, eq=False)
class RewardModel:
    """Expected return of one skill for the task reward of ``env_id`` / ``variant``.

    Convention: a turn of k >= 1 steps collects r_0 .. r_{k-1}; the discounted
    return is sum_t gamma^t r_t (a constant reward r gives r (1 - gamma^k) / (1 - gamma)).
    """

    features: FeatureMap
    head: LinearHead
    gamma: float
    env_id: str
    variant: str = ""
    errors: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not 0.0 < float(self.gamma) <= 1.0:
            raise ValueError(f"reward model gamma must be in (0, 1], got {self.gamma}")
        object.__setattr__(self, "gamma", float(self.gamma))
        if not isinstance(self.env_id, str) or not self.env_id:
            raise ValueError(f"reward model env_id must name the task env, got {self.env_id!r}")
        if self.head.outputs != REWARD_OUTPUTS:
            raise ValueError(f"reward head outputs must be {REWARD_OUTPUTS}, got {self.head.outputs}")
        if self.head.n_features != self.features.n_features:
            raise ValueError(
                f"reward head reads {self.head.n_features} features but the feature map makes "
                f"{self.features.n_features}; the parts come from different fits"
            )

    def predict(self, start_states: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """name -> (B,): discounted_return, reward."""
        out = self.head(self.features(start_states))
        return {name: out[:, i] for i, name in enumerate(REWARD_OUTPUTS)}

    def expected_return(self, start_states: Mapping[str, np.ndarray]) -> np.ndarray:
        return self.head(self.features(start_states))[:, 0]

    def to_files(self) -> dict[str, bytes]:
        meta = {
            "gamma": self.gamma,
            "env_id": self.env_id,
            "variant": self.variant,
            "features": self.features.meta(),
            "outputs": list(self.head.outputs),
            "errors": self.errors,
        }
        return pack("reward", meta, {**self.features.arrays(), **self.head.arrays("head.")})

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "RewardModel":
        meta, arrays = unpack(files, "reward")
        try:
            return cls(
                FeatureMap.from_parts(meta["features"], arrays),
                LinearHead.from_parts(meta["outputs"], arrays, "head."),
                meta["gamma"],
                meta["env_id"],
                meta.get("variant", ""),
                dict(meta.get("errors", {})),
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise file_error("reward.safetensors", "", f"does not form a valid reward model: {exc}", "re-export the model") from None

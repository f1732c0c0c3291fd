"""Duration model of an option: expected steps, expected discount and how its turn ends, per start state."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import numpy as np

from ..renamed_keys import DURATION_OUTPUT_RENAMES
from .features import FeatureMap
from .heads import LinearHead, SoftmaxHead
from .serial import file_error, pack, unpack

__all__ = ["DurationModel", "DURATION_OUTPUTS", "OUTCOME_CODES", "OUTCOME_LABELS"]

# Mirrors kinetome.library.runtime.records.EndReason (a test pins the equality); kept
# literal here so option models never import the runtime package (and mujoco with it).
OUTCOME_CODES = {"stopped": 0, "timed_out": 1, "env_ended": 2}
OUTCOME_LABELS = {v: k for k, v in OUTCOME_CODES.items()}

# duration:         E[k]                          (k env steps the skill ran)
# discount:         E[gamma^k]                    (discounted duration)
# stop_discount:    E[gamma^k * 1{stopped}]
# timeout_discount: E[gamma^k * 1{timed out}]
# The runtime hands over to the next skill of a chain after a stop or a timeout, so
# stop_discount + timeout_discount is the discount carried into the next skill.
DURATION_OUTPUTS = ("duration", "discount", "stop_discount", "timeout_discount")


@dataclass(frozen=True, eq=False)
class DurationModel:
    """How long a skill runs from a start state and how its turn ends.

    ``head`` predicts DURATION_OUTPUTS (ridge); ``outcome`` gives the probabilities of
    stopped / timed_out / env_ended (multinomial logistic regression), so the
    timeout probability is its ``timed_out`` column. ``errors`` holds the
    held-out errors measured when the model was fitted.
    """

    features: FeatureMap
    head: LinearHead
    outcome: SoftmaxHead
    gamma: float
    errors: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        if not 0.0 < float(self.gamma) <= 1.0:
            raise ValueError(f"duration model gamma must be in (0, 1], got {self.gamma}")
        object.__setattr__(self, "gamma", float(self.gamma))
        if self.head.outputs != DURATION_OUTPUTS:
            raise ValueError(f"duration head outputs must be {DURATION_OUTPUTS}, got {self.head.outputs}")
        for name, part in (("head", self.head), ("outcome", self.outcome)):
            if part.n_features != self.features.n_features:
                raise ValueError(
                    f"duration {name} reads {part.n_features} features but the feature map makes "
                    f"{self.features.n_features}; the parts come from different fits"
                )
        unknown = [c for c in self.outcome.classes if c not in OUTCOME_LABELS]
        if unknown:
            raise ValueError(f"duration outcome classes must be among {sorted(OUTCOME_LABELS)}, got {unknown}")

    def unseen_floor(self) -> float:
        """The probability an outcome never seen in training gets: the exact one-sided 95% upper
        bound after n training episodes without it, 1 - 0.05^(1/n) (about 3/n). Fitted models
        record n; a hand-built model without it gets 0."""
        n = int(self.errors.get("n_train") or 0)
        return 1.0 - 0.05 ** (1.0 / n) if n > 0 else 0.0

    def outcome_probabilities(self, x: np.ndarray) -> dict[str, np.ndarray]:
        """p_stopped, p_timed_out, p_env_ended from features ``x``; outcomes the classifier never saw
        in training get ``unseen_floor()`` each (never zero by construction), the seen ones share the rest."""
        unseen = [label for label, code in OUTCOME_CODES.items() if code not in self.outcome.classes]
        floor = min(self.unseen_floor(), 1.0 / max(1, len(OUTCOME_CODES)))
        keep = 1.0 - floor * len(unseen)
        out = {}
        for label, code in OUTCOME_CODES.items():
            p = self.outcome.probability(x, code)
            out[f"p_{label}"] = np.full(x.shape[0], floor) if label in unseen else keep * p
        return out

    def predict(self, start_states: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """name -> (B,): DURATION_OUTPUTS, handoff_discount, p_stopped, p_timed_out, p_env_ended."""
        x = self.features(start_states)
        heads = self.head(x)
        out = {name: heads[:, i] for i, name in enumerate(DURATION_OUTPUTS)}
        out.update(self.outcome_probabilities(x))
        # E[gamma^k 1{A}] can exceed neither E[gamma^k] nor P(A).
        out["stop_discount"] = np.minimum(out["stop_discount"], np.minimum(out["discount"], out["p_stopped"]))
        out["timeout_discount"] = np.minimum(out["timeout_discount"], np.minimum(out["discount"], out["p_timed_out"]))
        out["handoff_discount"] = out["stop_discount"] + out["timeout_discount"]
        return out

    def expected_duration(self, start_states: Mapping[str, np.ndarray]) -> np.ndarray:
        return self.head(self.features(start_states))[:, 0]

    def expected_discount(self, start_states: Mapping[str, np.ndarray]) -> np.ndarray:
        return self.head(self.features(start_states))[:, 1]

    def timeout_probability(self, start_states: Mapping[str, np.ndarray]) -> np.ndarray:
        return self.outcome_probabilities(self.features(start_states))["p_timed_out"]

    def to_files(self) -> dict[str, bytes]:
        meta = {
            "gamma": self.gamma,
            "features": self.features.meta(),
            "outputs": list(self.head.outputs),
            "outcome": self.outcome.meta(),
            "errors": self.errors,
        }
        arrays = {**self.features.arrays(), **self.head.arrays("head."), **self.outcome.arrays("outcome.")}
        return pack("duration", meta, arrays)

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "DurationModel":
        meta, arrays = unpack(files, "duration")
        try:
            fmap = FeatureMap.from_parts(meta["features"], arrays)
            return cls(
                fmap,
                LinearHead.from_parts([DURATION_OUTPUT_RENAMES.get(o, o) for o in meta["outputs"]], arrays, "head."),
                SoftmaxHead.from_parts(meta["outcome"], arrays, "outcome."),
                meta["gamma"],
                {DURATION_OUTPUT_RENAMES.get(k, k): v for k, v in dict(meta.get("errors", {})).items()},
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise file_error("duration.safetensors", "", f"does not form a valid duration model: {exc}", "re-export the model") from None

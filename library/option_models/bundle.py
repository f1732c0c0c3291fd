"""OptionModels: the duration, reward and end-state models of one skill version, with their metadata."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any, Mapping

from ..renamed_keys import OUTCOME_RENAMES
from .duration import DurationModel
from .end_state import END_STATE_OUTCOMES, EndStateModel
from .reward import RewardModel
from .serial import FORMAT, file_error
from .support import HeldOutEpisodes, SupportModel


__all__ = ["OptionModels", "ModelsMeta", "OUTCOME_KEYS"]

OUTCOME_KEYS = ("stopped", "timed_out", "env_ended", "refused")


@dataclass(frozen=True)
class ModelsMeta:
    """Where the models came from: skill, task, discount, data and fitting choices."""

    skill_ref: str
    env_id: str
    gamma: float
    episodes: int  # episodes in the rollout offered this skill (refused ones included)
    outcomes: dict[str, int]  # episode counts per OUTCOME_KEYS
    fitted_at: str  # ISO 8601 UTC
    features: tuple[str, ...]  # start-state quantities read by every model
    end_quantities: tuple[str, ...]
    variant: str = ""
    variant_digest: str = ""
    seed: int = 0
    holdout: float = 0.25
    method: str = "monte_carlo_ridge"
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        if not 0.0 < float(self.gamma) <= 1.0:
            raise ValueError(f"models gamma must be in (0, 1], got {self.gamma}")
        object.__setattr__(self, "gamma", float(self.gamma))
        if not self.env_id:
            raise ValueError("models env_id must name the env the rollouts ran on, got ''")
        if sorted(self.outcomes) != sorted(OUTCOME_KEYS) or any(int(v) < 0 for v in self.outcomes.values()):
            raise ValueError(f"models outcomes must count each of {OUTCOME_KEYS} (>= 0), got {self.outcomes}")
        object.__setattr__(self, "outcomes", {k: int(self.outcomes[k]) for k in OUTCOME_KEYS})
        if int(self.episodes) < sum(self.outcomes.values()):
            raise ValueError(f"models episodes ({self.episodes}) must be >= the outcome total {sum(self.outcomes.values())}")
        for name in ("features", "end_quantities", "notes"):
            object.__setattr__(self, name, tuple(str(x) for x in getattr(self, name)))
        if not self.features:
            raise ValueError("models features must name at least one quantity")
        if not 0.0 < float(self.holdout) < 1.0:
            raise ValueError(f"models holdout must be in (0, 1), got {self.holdout}")

    def to_json(self) -> dict[str, Any]:
        return {
            "skill_ref": self.skill_ref,
            "env_id": self.env_id,
            "variant": self.variant,
            "variant_digest": self.variant_digest,
            "gamma": self.gamma,
            "episodes": int(self.episodes),
            "outcomes": dict(self.outcomes),
            "fitted_at": self.fitted_at,
            "features": list(self.features),
            "end_quantities": list(self.end_quantities),
            "seed": int(self.seed),
            "holdout": float(self.holdout),
            "method": self.method,
            "notes": list(self.notes),
        }

    @classmethod
    def from_json(cls, data: Mapping[str, Any]) -> "ModelsMeta":
        fields = {k: data[k] for k in cls.__dataclass_fields__ if k in data}
        if isinstance(fields.get("outcomes"), dict):
            fields["outcomes"] = {OUTCOME_RENAMES.get(k, k): v for k, v in fields["outcomes"].items()}
        return cls(**fields)


@dataclass(frozen=True, eq=False)
class OptionModels:
    """All option models of one skill version.

    ``end_state`` models where stopped turns end, ``end_state_timed_out``
    where timed-out turns end (the runtime hands over after both); either is
    None when too few episodes ended that way to fit it. ``support`` and
    ``held_out`` (support.py) say where the models may be asked and keep the
    held-out episodes; models fitted before they existed have None.
    """

    duration: DurationModel
    reward: RewardModel
    end_state: EndStateModel | None
    meta: ModelsMeta
    end_state_timed_out: EndStateModel | None = None
    support: SupportModel | None = None  # where the models may be asked (None: fitted before support tests)
    held_out: HeldOutEpisodes | None = None  # the held-out split, to measure the models' error on a question

    def end_states(self) -> dict[str, EndStateModel]:
        """outcome -> end-state model, for the outcomes that have one."""
        out = {}
        for outcome, model in (("stopped", self.end_state), ("timed_out", self.end_state_timed_out)):
            if model is not None:
                out[outcome] = model
        return out

    def __post_init__(self) -> None:
        for name, model in (("duration", self.duration), ("reward", self.reward)):
            if model.gamma != self.meta.gamma:
                raise ValueError(f"{name} model gamma {model.gamma} must equal the models' gamma {self.meta.gamma}")
        parts = [("duration", self.duration.features), ("reward", self.reward.features)]
        for outcome, model in self.end_states().items():
            if model.outcome != outcome:
                raise ValueError(f"the {outcome} end-state slot holds a model of {model.outcome!r} turns")
            parts.append((f"{outcome} end-state", model.features))
            if model.quantities != self.meta.end_quantities:
                raise ValueError(
                    f"{outcome} end-state quantities {list(model.quantities)} must equal meta end_quantities "
                    f"{list(self.meta.end_quantities)}"
                )
        for name, fmap in parts:
            if fmap.quantities != self.meta.features:
                raise ValueError(f"{name} model reads {list(fmap.quantities)} but meta features are {list(self.meta.features)}")
            if not fmap.same_as(self.duration.features):
                raise ValueError(f"{name} model's feature map differs from the duration model's; all models must come from one fit")

    @property
    def gamma(self) -> float:
        return self.meta.gamma

    @property
    def features(self) -> tuple[str, ...]:
        return self.meta.features

    @property
    def feature_names(self) -> tuple[str, ...]:
        """Flat component names of the start-state features (``qpos[0]``, ...)."""
        return self.duration.features.input_names

    def outcome_fractions(self) -> dict[str, float]:
        """Fraction of the episodes offered this skill that stopped / timed out / ended with the env / were refused."""
        total = max(1, sum(self.meta.outcomes.values()))
        return {k: v / total for k, v in self.meta.outcomes.items()}

    def summary(self) -> dict[str, Any]:
        """Held-out errors and data counts, for ``kinetome show``."""
        out: dict[str, Any] = {
            "skill": self.meta.skill_ref,
            "env": self.meta.env_id,
            "variant": self.meta.variant,
            "gamma": self.meta.gamma,
            "episodes": self.meta.episodes,
            "outcomes": self.outcome_fractions(),
            "fitted_at": self.meta.fitted_at,
            "method": self.meta.method,
            "features": list(self.feature_names),
            "duration": self.duration.errors,
            "reward": self.reward.errors,
            "end_state": self.end_state.errors if self.end_state is not None else None,
            "end_state_timed_out": self.end_state_timed_out.errors if self.end_state_timed_out is not None else None,
        }
        if self.meta.notes:
            out["notes"] = list(self.meta.notes)
        return out

    def to_files(self) -> dict[str, bytes]:
        header = {
            "format": FORMAT,
            "kind": "option_models",
            "meta": self.meta.to_json(),
            "end_states": sorted(self.end_states()),
            "parts": [name for name in ("support", "held_out") if getattr(self, name) is not None],
        }
        files = {"models.json": (json.dumps(header, sort_keys=True, indent=2, allow_nan=False) + "\n").encode()}
        files.update(self.duration.to_files())
        files.update(self.reward.to_files())
        for model in self.end_states().values():
            files.update(model.to_files())
        for part in (self.support, self.held_out):
            if part is not None:
                files.update(part.to_files())
        return files

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "OptionModels":
        if "models.json" not in files:
            raise file_error("models.json", "", f"file is missing; got files {sorted(files)}", "pass every file that to_files() wrote")
        try:
            header = json.loads(bytes(files["models.json"]).decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise file_error("models.json", "", f"is not valid JSON ({exc})", "re-export the models") from None
        if not isinstance(header, dict) or header.get("format") != FORMAT or header.get("kind") != "option_models":
            got = header.get("format") if isinstance(header, dict) else type(header).__name__
            raise file_error("models.json", "format", f"must be {FORMAT!r} option_models, got {got!r}", "refit the models with this version of kinetome")
        try:
            meta = ModelsMeta.from_json(header["meta"])
        except (KeyError, TypeError, ValueError) as exc:
            raise file_error("models.json", "meta", f"is not valid model metadata: {exc}", "re-export the models") from None
        outcomes = header.get("end_states", [])
        if not isinstance(outcomes, list) or any(o not in END_STATE_OUTCOMES for o in outcomes):
            raise file_error("models.json", "end_states", f"must list outcomes among {sorted(END_STATE_OUTCOMES)}, got {outcomes!r}")
        ends = {o: EndStateModel.from_files(files, o) for o in outcomes}
        try:
            parts = header.get("parts", [])
            support = SupportModel.from_files(files) if "support" in parts else None
            held_out = HeldOutEpisodes.from_files(files) if "held_out" in parts else None
            return cls(
                DurationModel.from_files(files), RewardModel.from_files(files), ends.get("stopped"), meta, ends.get("timed_out"),
                support, held_out,
            )
        except ValueError as exc:
            raise file_error("models.json", "", f"models do not fit together: {exc}", "pass files from one export") from None

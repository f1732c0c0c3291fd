"""Where option models may be asked, and the held-out episodes that measure their error on a question.

``SupportModel``: a conformal support test over the start states a model was fitted
on. The score of a state is its Mahalanobis distance to the training starts (mean
and shrunk covariance of the training split); the threshold is the
ceil((n+1)(1-eps))-th smallest score of the n held-out starts (split conformal,
eps = 0.01): a new start from the training distribution scores above it with
probability at most eps, so a higher score says the model is asked outside what it
saw. Components that never varied in training get a small floor variance, so a
query that moves them scores very high.

``HeldOutEpisodes``: the held-out split itself (start states, end states, outcomes),
kept so that a chain check can replay a question (does B accept A's real end
states?) on episodes the model never trained on and widen its interval by the
model's error there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from .features import flatten_states
from .serial import file_error, pack, unpack

__all__ = ["SupportModel", "HeldOutEpisodes", "fit_support", "SUPPORT_EPS"]

SUPPORT_EPS = 0.01
_SHRINK = 0.05
_FLOOR = 1e-10


@dataclass(frozen=True, eq=False)
class SupportModel:
    """Mahalanobis score against the training starts, and the conformal threshold."""

    quantities: tuple[str, ...]
    shapes: tuple[tuple[int, ...], ...]
    mean: np.ndarray  # (d,)
    whiten: np.ndarray  # (d, d): score = norm(whiten @ (x - mean))
    threshold: float
    eps: float
    n_calibration: int

    def score(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        x = flatten_states(states, self.quantities, self.shapes, where="support query")
        return np.linalg.norm((x - self.mean) @ self.whiten.T, axis=1)

    def inside(self, states: Mapping[str, np.ndarray]) -> np.ndarray:
        """(B,) bool: the model saw starts like these."""
        return self.score(states) <= self.threshold

    def to_files(self) -> dict[str, bytes]:
        meta = {"quantities": list(self.quantities), "shapes": [list(s) for s in self.shapes], "threshold": self.threshold,
                "eps": self.eps, "n_calibration": self.n_calibration}
        return pack("support", meta, {"mean": self.mean, "whiten": self.whiten})

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "SupportModel":
        meta, arrays = unpack(files, "support")
        try:
            return cls(tuple(meta["quantities"]), tuple(tuple(s) for s in meta["shapes"]), arrays["mean"], arrays["whiten"],
                       float(meta["threshold"]), float(meta["eps"]), int(meta["n_calibration"]))
        except (KeyError, TypeError, ValueError) as exc:
            raise file_error("support.json", "", f"does not form a valid support model: {exc}", "refit the models") from None


def fit_support(train: Mapping[str, np.ndarray], held_out: Mapping[str, np.ndarray], quantities: Sequence[str], *,
                eps: float = SUPPORT_EPS) -> SupportModel:
    """Fit the score on ``train`` starts and calibrate its threshold on ``held_out`` starts."""
    quantities = tuple(quantities)
    shapes = tuple(tuple(np.asarray(train[q]).shape[1:]) for q in quantities)
    x = flatten_states(train, quantities, shapes, where="training starts")
    mean = x.mean(axis=0)
    cov = np.cov(x, rowvar=False).reshape(x.shape[1], x.shape[1]) if x.shape[0] > 1 else np.zeros((x.shape[1], x.shape[1]))
    scale = max(float(np.trace(cov)) / max(1, cov.shape[0]), _FLOOR)
    cov = (1 - _SHRINK) * cov + _SHRINK * np.diag(np.diag(cov)) + np.eye(cov.shape[0]) * _FLOOR * scale
    vals, vecs = np.linalg.eigh(cov)
    whiten = (vecs / np.sqrt(np.maximum(vals, _FLOOR * scale))).T
    model = SupportModel(quantities, shapes, mean, whiten, math.inf, eps, 0)
    cal = np.sort(model.score(held_out))
    k = math.ceil((cal.size + 1) * (1 - eps))
    threshold = float(cal[k - 1]) if 1 <= k <= cal.size else float(max(cal.max(initial=0.0), model.score(train).max()))
    return SupportModel(quantities, shapes, mean, whiten, threshold, eps, int(cal.size))


@dataclass(frozen=True, eq=False)
class HeldOutEpisodes:
    """The held-out split: start states (model inputs), end states and outcome codes."""

    starts: dict[str, np.ndarray]
    ends: dict[str, np.ndarray]
    outcomes: np.ndarray  # (n,) EndReason codes

    @property
    def n(self) -> int:
        return int(self.outcomes.shape[0])

    def to_files(self) -> dict[str, bytes]:
        arrays = {**{f"start.{k}": v for k, v in self.starts.items()}, **{f"end.{k}": v for k, v in self.ends.items()},
                  "outcomes": self.outcomes.astype(np.float64)}
        return pack("held_out", {"n": self.n}, arrays)

    @classmethod
    def from_files(cls, files: Mapping[str, bytes]) -> "HeldOutEpisodes":
        _, arrays = unpack(files, "held_out")
        starts = {k.removeprefix("start."): v for k, v in arrays.items() if k.startswith("start.")}
        ends = {k.removeprefix("end."): v for k, v in arrays.items() if k.startswith("end.")}
        return cls(starts, ends, arrays["outcomes"].astype(np.int64))

    @classmethod
    def take(cls, starts: Mapping[str, np.ndarray], ends: Mapping[str, np.ndarray], outcomes: np.ndarray, rows: np.ndarray,
             start_quantities: Sequence[str], end_quantities: Sequence[str]) -> "HeldOutEpisodes":
        return cls({q: np.asarray(starts[q], dtype=np.float64)[rows] for q in start_quantities},
                   {q: np.asarray(ends[q], dtype=np.float64)[rows] for q in end_quantities}, np.asarray(outcomes)[rows])

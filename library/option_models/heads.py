"""Linear prediction heads on a design matrix: clipped regression and softmax classification."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from .features import _frozen

__all__ = ["LinearHead", "SoftmaxHead"]


@dataclass(frozen=True, eq=False)
class LinearHead:
    """``clip(X @ weights + bias, low, high)`` for named outputs.

    ``low``/``high`` clip predictions to the range seen in training, so a
    polynomial expansion cannot extrapolate to, say, a negative step count.
    """

    outputs: tuple[str, ...]
    weights: np.ndarray  # (p, m)
    bias: np.ndarray  # (m,)
    low: np.ndarray  # (m,)
    high: np.ndarray  # (m,)

    def __post_init__(self) -> None:
        object.__setattr__(self, "outputs", tuple(str(o) for o in self.outputs))
        m = len(self.outputs)
        if m < 1:
            raise ValueError("a linear head must have at least one output, got none")
        w = np.asarray(self.weights)
        if w.ndim != 2 or w.shape[1] != m:
            raise ValueError(f"head weights must have shape (p, {m}) for outputs {list(self.outputs)}, got {w.shape}")
        object.__setattr__(self, "weights", _frozen(w, "head weights", w.shape))
        object.__setattr__(self, "bias", _frozen(self.bias, "head bias", (m,)))
        object.__setattr__(self, "low", _frozen(self.low, "head low", (m,), finite=False))
        object.__setattr__(self, "high", _frozen(self.high, "head high", (m,), finite=False))
        if np.any(np.isnan(self.low)) or np.any(np.isnan(self.high)) or np.any(self.low > self.high):
            raise ValueError(f"head low must be <= high, got low {self.low.tolist()} high {self.high.tolist()}")

    @property
    def n_features(self) -> int:
        return int(self.weights.shape[0])

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """(B, m) predictions from the (B, p) design matrix."""
        if x.ndim != 2 or x.shape[1] != self.n_features:
            raise ValueError(f"design matrix must have shape (B, {self.n_features}), got {x.shape}")
        return np.clip(x @ self.weights + self.bias, self.low, self.high)

    def arrays(self, prefix: str) -> dict[str, np.ndarray]:
        return {f"{prefix}weights": self.weights, f"{prefix}bias": self.bias, f"{prefix}low": self.low, f"{prefix}high": self.high}

    @classmethod
    def from_parts(cls, outputs: list[str], arrays: Mapping[str, np.ndarray], prefix: str) -> "LinearHead":
        try:
            return cls(tuple(outputs), *(arrays[f"{prefix}{k}"] for k in ("weights", "bias", "low", "high")))
        except KeyError as exc:
            raise ValueError(f"head array {exc.args[0]!r} is missing") from None


@dataclass(frozen=True, eq=False)
class SoftmaxHead:
    """Class probabilities ``softmax(X @ weights + bias)`` over integer class codes.

    Only classes seen in training are modelled; every other code has
    probability 0. One class means a constant probability of 1.
    """

    classes: tuple[int, ...]
    weights: np.ndarray  # (p, K)
    bias: np.ndarray  # (K,)

    def __post_init__(self) -> None:
        object.__setattr__(self, "classes", tuple(int(c) for c in self.classes))
        k = len(self.classes)
        if k < 1 or len(set(self.classes)) != k:
            raise ValueError(f"softmax classes must be distinct and at least one, got {list(self.classes)}")
        w = np.asarray(self.weights)
        if w.ndim != 2 or w.shape[1] != k:
            raise ValueError(f"softmax weights must have shape (p, {k}) for classes {list(self.classes)}, got {w.shape}")
        object.__setattr__(self, "weights", _frozen(w, "softmax weights", w.shape))
        object.__setattr__(self, "bias", _frozen(self.bias, "softmax bias", (k,)))

    @property
    def n_features(self) -> int:
        return int(self.weights.shape[0])

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """(B, K) probabilities, columns in the order of ``classes``."""
        if x.ndim != 2 or x.shape[1] != self.n_features:
            raise ValueError(f"design matrix must have shape (B, {self.n_features}), got {x.shape}")
        logits = x @ self.weights + self.bias
        logits -= logits.max(axis=1, keepdims=True)
        e = np.exp(logits)
        return e / e.sum(axis=1, keepdims=True)

    def probability(self, x: np.ndarray, code: int) -> np.ndarray:
        """(B,) probability of one class code (0 if never seen in training)."""
        if int(code) not in self.classes:
            return np.zeros(x.shape[0])
        return self(x)[:, self.classes.index(int(code))]

    def meta(self) -> dict[str, Any]:
        return {"classes": list(self.classes)}

    def arrays(self, prefix: str) -> dict[str, np.ndarray]:
        return {f"{prefix}weights": self.weights, f"{prefix}bias": self.bias}

    @classmethod
    def from_parts(cls, meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray], prefix: str) -> "SoftmaxHead":
        try:
            return cls(tuple(meta["classes"]), arrays[f"{prefix}weights"], arrays[f"{prefix}bias"])
        except KeyError as exc:
            raise ValueError(f"softmax entry {exc.args[0]!r} is missing") from None

"""End-state model of an option: where a skill stops, as a sampleable conditional distribution.

end = mean(start) + residual. The mean is a ridge regression on the start
features; the residual distribution is the pool of out-of-fold residuals kept
at fit time (residuals assumed independent of the start state). ``sample``
draws whole residual rows from the pool (keeping the correlation between
components); ``interval`` takes split-conformal quantiles of the pool per
component (Lei et al., 2018, "Distribution-free predictive inference for
regression"): with n pooled residuals, the two-sided level-(1 - a) interval
uses the floor((n+1) a/2)-th and ceil((n+1)(1 - a/2))-th order statistics,
which covers at least 1 - a of exchangeable new end states.

One model covers one way a turn ends (``outcome``): ``stopped``
(``stops_when`` became true) or ``timed_out`` (``max_steps`` passed); the
runtime hands over to the next skill after either. End states of other
outcomes never enter a model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from .features import FeatureMap, _frozen, component_names, unflatten_states
from .heads import LinearHead
from .serial import file_error, pack, unpack

__all__ = ["EndStateModel", "END_STATE_OUTCOMES", "envelope_arrays", "conformal_offsets"]

# outcome -> file kind ("end_state.json", "end_state_timed_out.json", ...)
END_STATE_OUTCOMES = {"stopped": "end_state", "timed_out": "end_state_timed_out"}


def envelope_arrays(
    envelope: Any, quantities: tuple[str, ...], shapes: tuple[tuple[int, ...], ...]
) -> tuple[np.ndarray, np.ndarray]:
    """Flat (D,) low/high bounds, -inf/+inf where unknown.

    ``envelope`` is None, a mapping name -> (low, high) (each broadcastable to
    the quantity's shape, None for unbounded), or a state layout whose
    quantities carry ``low``/``high`` (``layout[name].low``).
    """
    lows, highs = [], []
    for name, shape in zip(quantities, shapes):
        size = int(np.prod(shape, dtype=np.int64)) if shape else 1
        lo = hi = None
        if envelope is not None and name in envelope:
            entry = envelope[name]
            if hasattr(entry, "low") and hasattr(entry, "high"):  # a layout's Quantity
                lo, hi = entry.low, entry.high
            else:
                lo, hi = entry
        lo_arr = np.full(size, -np.inf) if lo is None else np.broadcast_to(np.asarray(lo, dtype=np.float64).ravel(), (size,))
        hi_arr = np.full(size, np.inf) if hi is None else np.broadcast_to(np.asarray(hi, dtype=np.float64).ravel(), (size,))
        if np.any(lo_arr > hi_arr):
            raise ValueError(f"envelope of {name!r} must have low <= high, got low {lo_arr.tolist()} high {hi_arr.tolist()}")
        lows.append(lo_arr)
        highs.append(hi_arr)
    return np.concatenate(lows), np.concatenate(highs)


def conformal_offsets(residuals: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-component (D,) lower and upper residual offsets of a level interval.

    Order statistics with the split-conformal finite-sample correction; an
    offset is -inf/+inf when the pool is too small for the level.
    """
    if not 0.0 < level < 1.0:
        raise ValueError(f"interval level must be in (0, 1), got {level}")
    n = residuals.shape[0]
    alpha = 1.0 - level
    ordered = np.sort(residuals, axis=0)
    eps = 1e-9  # (n+1) a/2 is often an integer up to rounding (1 - 0.9 = 0.0999...98)
    lo_rank = math.floor((n + 1) * alpha / 2.0 + eps)  # 1-based
    hi_rank = math.ceil((n + 1) * (1.0 - alpha / 2.0) - eps)
    d = residuals.shape[1]
    lo = ordered[lo_rank - 1] if lo_rank >= 1 else np.full(d, -np.inf)
    hi = ordered[hi_rank - 1] if hi_rank <= n else np.full(d, np.inf)
    return lo, hi


@dataclass(frozen=True, eq=False)
class EndStateModel:
    """p(end state | start state, outcome) over ``quantities``."""

    features: FeatureMap
    quantities: tuple[str, ...]
    shapes: tuple[tuple[int, ...], ...]
    mean: LinearHead  # outputs: component names of quantities
    residuals: np.ndarray  # (r, D) out-of-fold residual pool
    low: np.ndarray  # (D,) physical envelope, -inf where unknown
    high: np.ndarray  # (D,)
    errors: dict = field(default_factory=dict)
    outcome: str = "stopped"

    def __post_init__(self) -> None:
        if self.outcome not in END_STATE_OUTCOMES:
            raise ValueError(f"end-state outcome must be one of {sorted(END_STATE_OUTCOMES)}, got {self.outcome!r}")
        object.__setattr__(self, "quantities", tuple(self.quantities))
        object.__setattr__(self, "shapes", tuple(tuple(int(x) for x in s) for s in self.shapes))
        if not self.quantities or len(self.shapes) != len(self.quantities):
            raise ValueError(
                f"end-state quantities must be non-empty with one shape each, got {list(self.quantities)} "
                f"and {len(self.shapes)} shapes"
            )
        names = component_names(self.quantities, self.shapes)
        d = len(names)
        if self.mean.outputs != names:
            raise ValueError(f"end-state mean outputs must be {list(names)}, got {list(self.mean.outputs)}")
        if self.mean.n_features != self.features.n_features:
            raise ValueError(
                f"end-state mean reads {self.mean.n_features} features but the feature map makes "
                f"{self.features.n_features}; the parts come from different fits"
            )
        res = np.asarray(self.residuals)
        if res.ndim != 2 or res.shape[1] != d or res.shape[0] < 1:
            raise ValueError(f"end-state residuals must have shape (r >= 1, {d}), got {res.shape}")
        object.__setattr__(self, "residuals", _frozen(res, "end-state residuals", res.shape))
        object.__setattr__(self, "low", _frozen(self.low, "end-state low", (d,), finite=False))
        object.__setattr__(self, "high", _frozen(self.high, "end-state high", (d,), finite=False))
        if np.any(np.isnan(self.low)) or np.any(np.isnan(self.high)) or np.any(self.low > self.high):
            raise ValueError("end-state envelope must have low <= high (no NaN)")

    @property
    def component_names(self) -> tuple[str, ...]:
        return self.mean.outputs

    def _mean_flat(self, start_states: Mapping[str, np.ndarray]) -> np.ndarray:
        return np.clip(self.mean(self.features(start_states)), self.low, self.high)

    def predict(self, start_states: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """Mean end state: name -> (B, *shape)."""
        return unflatten_states(self._mean_flat(start_states), self.quantities, self.shapes)

    def sample(self, start_states: Mapping[str, np.ndarray], rng: np.random.Generator, k: int = 1) -> dict[str, np.ndarray]:
        """k draws per start: name -> (B, k, *shape), clipped to the envelope."""
        if int(k) < 1:
            raise ValueError(f"k (draws per start state) must be >= 1, got {k}")
        mean = self._mean_flat(start_states)
        pick = rng.integers(0, self.residuals.shape[0], size=(mean.shape[0], int(k)))
        draws = np.clip(mean[:, None, :] + self.residuals[pick], self.low, self.high)
        return unflatten_states(draws, self.quantities, self.shapes)

    def interval(self, start_states: Mapping[str, np.ndarray], level: float = 0.9) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
        """Per-component prediction intervals (low, high): name -> (B, *shape) each."""
        lo, hi = self.interval_flat(start_states, level)
        return (unflatten_states(lo, self.quantities, self.shapes), unflatten_states(hi, self.quantities, self.shapes))

    def interval_flat(self, start_states: Mapping[str, np.ndarray], level: float = 0.9) -> tuple[np.ndarray, np.ndarray]:
        """As ``interval`` but flat (B, D) arrays in ``component_names`` order."""
        mean = self._mean_flat(start_states)
        q_lo, q_hi = conformal_offsets(self.residuals, level)
        return (np.clip(mean + q_lo, self.low, self.high), np.clip(mean + q_hi, self.low, self.high))

    def to_files(self) -> dict[str, bytes]:
        meta = {
            "features": self.features.meta(),
            "quantities": list(self.quantities),
            "shapes": [list(s) for s in self.shapes],
            "errors": self.errors,
        }
        arrays = {
            **self.features.arrays(),
            **self.mean.arrays("mean."),
            "residuals": self.residuals,
            "envelope.low": self.low,
            "envelope.high": self.high,
        }
        return pack(END_STATE_OUTCOMES[self.outcome], meta, arrays)

    @classmethod
    def from_files(cls, files: Mapping[str, bytes], outcome: str = "stopped") -> "EndStateModel":
        if outcome not in END_STATE_OUTCOMES:
            raise ValueError(f"end-state outcome must be one of {sorted(END_STATE_OUTCOMES)}, got {outcome!r}")
        kind = END_STATE_OUTCOMES[outcome]
        meta, arrays = unpack(files, kind)
        try:
            quantities = tuple(str(q) for q in meta["quantities"])
            shapes = tuple(tuple(int(x) for x in s) for s in meta["shapes"])
            return cls(
                FeatureMap.from_parts(meta["features"], arrays),
                quantities,
                shapes,
                LinearHead.from_parts(list(component_names(quantities, shapes)), arrays, "mean."),
                arrays["residuals"],
                arrays["envelope.low"],
                arrays["envelope.high"],
                dict(meta.get("errors", {})),
                outcome,
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise file_error(f"{kind}.safetensors", "", f"does not form a valid end-state model: {exc}", "re-export the model") from None

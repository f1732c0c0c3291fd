"""Start-state features: named quantities flattened, standardised and expanded for linear models.

Expansions (chosen at fit time, stored with the model):

- ``linear``: the standardised inputs z.
- ``poly2``: z plus every product z_i z_j (i <= j): exact for targets that are
  quadratic in the state, 1 + d + d(d+1)/2 columns with the intercept. The
  default for d <= 12 inputs.
- ``rff``: z plus m random Fourier features sqrt(2/m) cos(z W + b) with
  W ~ N(0, 1/l^2), b ~ U(0, 2 pi) (Rahimi & Recht 2007), a smooth kernel
  regression whose size does not grow with d. The default for d > 12.

The intercept is not a column: linear heads carry their own bias.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

__all__ = [
    "EXPANSIONS",
    "FeatureMap",
    "component_names",
    "default_quantities",
    "flatten_states",
    "unflatten_states",
]

EXPANSIONS = ("linear", "poly2", "rff")


def default_quantities(values: Mapping[str, np.ndarray]) -> tuple[str, ...]:
    """Scalar and vector quantities of a batched state dict, skipping Jacobians (``*_jac``, 2-D)."""
    return tuple(
        name for name, v in values.items() if not name.endswith("_jac") and np.ndim(v) <= 2
    )


def component_names(quantities: tuple[str, ...], shapes: tuple[tuple[int, ...], ...]) -> tuple[str, ...]:
    """Flat component labels: ``torso_height``, ``qpos[0]``, ``m[1,2]``."""
    out: list[str] = []
    for name, shape in zip(quantities, shapes):
        if not shape:
            out.append(name)
            continue
        for idx in np.ndindex(*shape):
            out.append(f"{name}[{','.join(str(i) for i in idx)}]")
    return tuple(out)


def flatten_states(
    values: Mapping[str, np.ndarray],
    quantities: tuple[str, ...],
    shapes: tuple[tuple[int, ...], ...],
    *,
    where: str = "state",
) -> np.ndarray:
    """(B, d) float64 from named values, checking names and per-state shapes."""
    cols: list[np.ndarray] = []
    batch: int | None = None
    for name, shape in zip(quantities, shapes):
        if name not in values:
            raise KeyError(
                f"{where} must contain quantity {name!r}; got {sorted(values)}; "
                f"pass states with every quantity the model was fitted on"
            )
        v = np.asarray(values[name], dtype=np.float64)
        if v.shape[1:] != tuple(shape) or v.ndim != len(shape) + 1:
            raise ValueError(
                f"{where}[{name!r}] must have shape (B, {', '.join(map(str, shape))}) "
                f"(batch first), got {v.shape}"
            )
        if batch is None:
            batch = v.shape[0]
        elif v.shape[0] != batch:
            raise ValueError(f"{where}[{name!r}] has {v.shape[0]} rows but earlier quantities have {batch}")
        cols.append(v.reshape(v.shape[0], -1))
    if not cols:
        raise ValueError(f"{where}: no quantities to read; give at least one name")
    return np.concatenate(cols, axis=1)


def unflatten_states(
    flat: np.ndarray, quantities: tuple[str, ...], shapes: tuple[tuple[int, ...], ...]
) -> dict[str, np.ndarray]:
    """Inverse of ``flatten_states`` for arrays (..., d): name -> (..., *shape)."""
    out: dict[str, np.ndarray] = {}
    lead = flat.shape[:-1]
    at = 0
    for name, shape in zip(quantities, shapes):
        size = int(np.prod(shape, dtype=np.int64)) if shape else 1
        out[name] = flat[..., at : at + size].reshape(*lead, *shape)
        at += size
    return out


def _frozen(a: Any, name: str, shape: tuple[int, ...], *, finite: bool = True) -> np.ndarray:
    arr = np.array(a, dtype=np.float64)
    if arr.shape != shape:
        raise ValueError(f"{name} must have shape {shape}, got {arr.shape}")
    if finite and not np.all(np.isfinite(arr)):
        raise ValueError(f"{name} must be finite, got {int(np.sum(~np.isfinite(arr)))} non-finite entries")
    arr.setflags(write=False)
    return arr


@dataclass(frozen=True, eq=False)
class FeatureMap:
    """Flatten ``quantities``, standardise by ``center``/``scale``, then expand."""

    quantities: tuple[str, ...]
    shapes: tuple[tuple[int, ...], ...]
    center: np.ndarray  # (d,)
    scale: np.ndarray  # (d,), > 0
    expansion: str = "linear"
    rff_weights: np.ndarray | None = None  # (d, m) for "rff"
    rff_phase: np.ndarray | None = None  # (m,) for "rff"

    def __post_init__(self) -> None:
        object.__setattr__(self, "quantities", tuple(self.quantities))
        object.__setattr__(self, "shapes", tuple(tuple(int(x) for x in s) for s in self.shapes))
        if not self.quantities:
            raise ValueError("feature quantities must name at least one quantity, got none")
        if len(self.shapes) != len(self.quantities):
            raise ValueError(
                f"feature shapes must give one shape per quantity ({len(self.quantities)}), got {len(self.shapes)}"
            )
        if len(set(self.quantities)) != len(self.quantities):
            raise ValueError(f"feature quantities must be distinct, got {list(self.quantities)}")
        if self.expansion not in EXPANSIONS:
            raise ValueError(f"feature expansion must be one of {EXPANSIONS}, got {self.expansion!r}")
        d = self.n_inputs
        object.__setattr__(self, "center", _frozen(self.center, "feature center", (d,)))
        object.__setattr__(self, "scale", _frozen(self.scale, "feature scale", (d,)))
        if np.any(self.scale <= 0):
            raise ValueError(f"feature scale must be > 0, got min {float(self.scale.min())}")
        if self.expansion == "rff":
            if self.rff_weights is None or self.rff_phase is None:
                raise ValueError("rff expansion needs rff_weights (d, m) and rff_phase (m,); fit the map again")
            m = int(np.shape(self.rff_phase)[0]) if np.ndim(self.rff_phase) == 1 else -1
            if m < 1:
                raise ValueError(f"rff_phase must have shape (m,) with m >= 1, got {np.shape(self.rff_phase)}")
            object.__setattr__(self, "rff_weights", _frozen(self.rff_weights, "rff_weights", (d, m)))
            object.__setattr__(self, "rff_phase", _frozen(self.rff_phase, "rff_phase", (m,)))
        elif self.rff_weights is not None or self.rff_phase is not None:
            raise ValueError(f"rff_weights/rff_phase are only for the rff expansion, not {self.expansion!r}")

    @property
    def n_inputs(self) -> int:
        return sum(int(np.prod(s, dtype=np.int64)) if s else 1 for s in self.shapes)

    @property
    def n_features(self) -> int:
        d = self.n_inputs
        if self.expansion == "linear":
            return d
        if self.expansion == "poly2":
            return d + d * (d + 1) // 2
        return d + int(self.rff_phase.shape[0])

    @property
    def input_names(self) -> tuple[str, ...]:
        return component_names(self.quantities, self.shapes)

    def same_as(self, other: "FeatureMap") -> bool:
        """True when both maps compute identical features (same names, expansion and arrays)."""
        if (self.quantities, self.shapes, self.expansion) != (other.quantities, other.shapes, other.expansion):
            return False
        pairs = [(self.center, other.center), (self.scale, other.scale)]
        if self.expansion == "rff":
            pairs += [(self.rff_weights, other.rff_weights), (self.rff_phase, other.rff_phase)]
        return all(a.shape == b.shape and np.array_equal(a, b) for a, b in pairs)

    def standardise(self, values: Mapping[str, np.ndarray]) -> np.ndarray:
        """(B, d) standardised inputs z."""
        raw = flatten_states(values, self.quantities, self.shapes, where="start states")
        return (raw - self.center) / self.scale

    def __call__(self, values: Mapping[str, np.ndarray]) -> np.ndarray:
        """(B, n_features) design matrix for the linear heads."""
        return self.expand(self.standardise(values))

    def expand(self, z: np.ndarray) -> np.ndarray:
        if self.expansion == "linear":
            return z
        if self.expansion == "poly2":
            i, j = np.triu_indices(z.shape[1])
            return np.concatenate([z, z[:, i] * z[:, j]], axis=1)
        m = self.rff_phase.shape[0]
        return np.concatenate([z, np.sqrt(2.0 / m) * np.cos(z @ self.rff_weights + self.rff_phase)], axis=1)

    # serialisation pieces, used by the models that own a feature map
    def meta(self) -> dict[str, Any]:
        return {
            "quantities": list(self.quantities),
            "shapes": [list(s) for s in self.shapes],
            "expansion": self.expansion,
        }

    def arrays(self, prefix: str = "features.") -> dict[str, np.ndarray]:
        out = {f"{prefix}center": self.center, f"{prefix}scale": self.scale}
        if self.expansion == "rff":
            out[f"{prefix}rff_weights"] = self.rff_weights
            out[f"{prefix}rff_phase"] = self.rff_phase
        return out

    @classmethod
    def from_parts(cls, meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray], prefix: str = "features.") -> "FeatureMap":
        try:
            quantities = tuple(str(q) for q in meta["quantities"])
            shapes = tuple(tuple(int(x) for x in s) for s in meta["shapes"])
            expansion = str(meta["expansion"])
        except (KeyError, TypeError, ValueError) as exc:
            raise ValueError(f"feature metadata must have quantities, shapes and expansion ({exc!r})") from None
        rff = expansion == "rff"
        try:
            return cls(
                quantities,
                shapes,
                arrays[f"{prefix}center"],
                arrays[f"{prefix}scale"],
                expansion,
                arrays[f"{prefix}rff_weights"] if rff else None,
                arrays[f"{prefix}rff_phase"] if rff else None,
            )
        except KeyError as exc:
            raise ValueError(f"feature array {exc.args[0]!r} is missing") from None

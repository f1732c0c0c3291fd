"""Intra-option TD learning of option models from per-step data (least-squares TD on linear features).

Second fitting method beside Monte Carlo regression. Every step of a turn is
a sample of the option-model Bellman equations (Sutton, Precup & Singh, 1999,
"Between MDPs and semi-MDPs", Sec. 5), with beta' = 1 if the turn ends at
s_{t+1} (``stops_when`` true or the env terminated):

    R^o(s) = E[ r_t + gamma (1 - beta') R^o(s_{t+1}) ]             discounted return
    D(s)   = E[ gamma beta' + gamma (1 - beta') D(s_{t+1}) ]        E[gamma^k]
    K(s)   = E[ 1 + (1 - beta') K(s_{t+1}) ]                        E[k]
    H(s)   = E[ gamma stop' + gamma (1 - beta') H(s_{t+1}) ]        E[gamma^k 1{stopped}]
    S(s)   = E[ stop' + (1 - beta') S(s_{t+1}) ]                    P(stopped)

Each is a value function V(s) = E[c_t + g (1 - beta') V(s')] with cumulant c
and discount g; with V = phi(s) . w, least-squares TD (Bradtke & Barto, 1996)
solves sum_t phi_t (phi_t - g (1 - beta'_t) phi'_t)^T w = sum_t phi_t c_t.
Using every intermediate state as a start makes TD use the data of a turn
many times over, where Monte Carlo regression uses only the turn's start.

Termination must be Markov in the features: a ``max_steps`` timeout is not
(it depends on skill time), so a cut transition (``truncated``) is
bootstrapped from s_{t+1} as if the turn went on: TD models the option
without its step cap. The runtime records segment start/end states only; TD
needs, per step of a turn, the named state s_t and s_{t+1} (or qpos/qvel to
rebuild it), the reward r_t, and the flags stopped/terminated/truncated.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from kinetome.library.option_models import FeatureMap

from .fitting_kernels import fit_feature_map

__all__ = ["StepTransitions", "TDModels", "TD_OUTPUTS", "fit_td_models"]

TD_OUTPUTS = ("duration", "discount", "stop_discount", "p_stopped", "discounted_return")


@dataclass(frozen=True, eq=False)
class StepTransitions:
    """T transitions (s_t, r_t, s_{t+1}) of one skill, pooled over episodes.

    ``stopped``/``terminated``: the turn ended at s_{t+1} by ``stops_when`` /
    by the env; ``truncated``: the data stop at s_{t+1} without a termination
    (step cap, end of recording).
    """

    state: Mapping[str, np.ndarray]  # name -> (T, *shape)
    next_state: Mapping[str, np.ndarray]  # name -> (T, *shape)
    reward: np.ndarray  # (T,)
    stopped: np.ndarray  # (T,) bool
    terminated: np.ndarray  # (T,) bool
    truncated: np.ndarray  # (T,) bool

    def __post_init__(self) -> None:
        t = np.asarray(self.reward).shape
        if len(t) != 1 or t[0] < 1:
            raise ValueError(f"reward must have shape (T,) with T >= 1, got {t}")
        for name in ("stopped", "terminated", "truncated"):
            arr = np.asarray(getattr(self, name))
            if arr.shape != t or arr.dtype != np.bool_:
                raise ValueError(f"{name} must be a bool array of shape {t}, got {arr.dtype} {arr.shape}")
        both = np.asarray(self.stopped) & np.asarray(self.terminated)
        if both.any():
            raise ValueError(f"a transition cannot be both stopped and terminated, got {int(both.sum())}; stopped wins in the runtime")
        for label, values in (("state", self.state), ("next_state", self.next_state)):
            bad = {k: np.shape(v) for k, v in values.items() if np.shape(v)[:1] != t}
            if bad:
                raise ValueError(f"{label} quantities must have T={t[0]} rows, got {bad}")

    @property
    def ended(self) -> np.ndarray:
        """(T,) bool: beta' = 1, the turn ended at s_{t+1}."""
        return np.asarray(self.stopped) | np.asarray(self.terminated)


@dataclass(frozen=True, eq=False)
class TDModels:
    """Linear option models from LSTD: V_h(s) = [phi(s), 1] . weights[:, h]."""

    features: FeatureMap
    weights: np.ndarray  # (n_features + 1, len(TD_OUTPUTS))
    gamma: float

    def predict(self, states: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
        """name -> (B,) for TD_OUTPUTS; probabilities and discounts clipped to [0, 1], duration to >= 1."""
        phi = self.features(states)
        v = np.concatenate([phi, np.ones((phi.shape[0], 1))], axis=1) @ self.weights
        out = {name: v[:, i] for i, name in enumerate(TD_OUTPUTS)}
        for name in ("discount", "stop_discount", "p_stopped"):
            out[name] = np.clip(out[name], 0.0, 1.0)
        out["duration"] = np.maximum(out["duration"], 1.0)
        return out


def fit_td_models(
    data: StepTransitions,
    *,
    features: Sequence[str],
    gamma: float,
    expansion: str = "linear",
    ridge: float = 1e-8,
    seed: int = 0,
) -> TDModels:
    """LSTD(0) for every TD_OUTPUTS head at once (one feature matrix, five right-hand sides).

    ``ridge`` (relative to the mean diagonal of A) regularises a singular A
    (redundant features, states never left). With g = 1 heads (steps,
    p_stopped) the solution exists only if turns end with probability 1.
    """
    if not 0.0 < gamma <= 1.0:
        raise ValueError(f"gamma must be in (0, 1], got {gamma}")
    fmap = fit_feature_map(data.state, tuple(features), expansion=expansion, rng=np.random.default_rng(seed))
    phi = fmap(data.state)
    phi_next = fmap(data.next_state)
    ones = np.ones((phi.shape[0], 1))
    phi = np.concatenate([phi, ones], axis=1)
    phi_next = np.concatenate([phi_next, ones], axis=1)
    cont = (~data.ended).astype(np.float64)  # 1 - beta'
    stop = np.asarray(data.stopped, dtype=np.float64)
    end = data.ended.astype(np.float64)
    r = np.asarray(data.reward, dtype=np.float64)
    # (cumulant c_t, discount g) per head, in TD_OUTPUTS order
    heads = [
        (np.ones_like(r), 1.0),
        (gamma * end, gamma),
        (gamma * stop, gamma),
        (stop, 1.0),
        (r, gamma),
    ]
    q = phi.shape[1]
    weights = np.empty((q, len(heads)))
    for g in sorted({g for _, g in heads}):  # one A matrix per discount g
        a = phi.T @ (phi - g * cont[:, None] * phi_next)
        a += ridge * max(abs(float(np.trace(a))) / q, 1e-300) * np.eye(q)
        cols = [h for h, (_, gh) in enumerate(heads) if gh == g]
        rhs = phi.T @ np.stack([heads[h][0] for h in cols], axis=1)
        weights[:, cols] = np.linalg.solve(a, rhs)
    return TDModels(fmap, weights, float(gamma))

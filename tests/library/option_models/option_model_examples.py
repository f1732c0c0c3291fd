"""Hand-built option models with known closed forms, for tests that must not depend on fitting."""

from __future__ import annotations

import numpy as np

from kinetome.library.option_models import (
    DURATION_OUTPUTS,
    REWARD_OUTPUTS,
    DurationModel,
    EndStateModel,
    FeatureMap,
    LinearHead,
    ModelsMeta,
    OptionModels,
    RewardModel,
    SoftmaxHead,
    component_names,
)

__all__ = ["identity_map", "linear_models", "random_models"]


def identity_map(name: str = "x", dim: int = 2, expansion: str = "linear", rng: np.random.Generator | None = None) -> FeatureMap:
    """Feature map with center 0, scale 1: the linear expansion returns the state itself."""
    if expansion == "rff":
        rng = rng or np.random.default_rng(0)
        return FeatureMap((name,), ((dim,),), np.zeros(dim), np.ones(dim), "rff", rng.normal(size=(dim, 5)), rng.uniform(0, 6.28, 5))
    return FeatureMap((name,), ((dim,),), np.zeros(dim), np.ones(dim), expansion)


def linear_models(
    *,
    ref: str,
    gamma: float,
    steps: float,
    reward_w: np.ndarray,
    reward_b: float,
    end_m: np.ndarray | None,
    end_c: np.ndarray | None = None,
    p_stop: float = 1.0,
    residuals: np.ndarray | None = None,
    dim: int = 2,
    name: str = "x",
    timeout_m: np.ndarray | None = None,
) -> OptionModels:
    """Models of a skill with constant duration, linear reward and a linear end state end = M x + c.

    Constant stop probability ``p_stop`` (timed out otherwise); the handoff
    discount is then p_stop * gamma^steps, the return a linear function of x.
    ``timeout_m`` adds a timed-out end-state model end = timeout_m x (no noise).
    """
    fmap = identity_map(name, dim=dim)
    disc = gamma**steps
    inf = np.inf
    dur_head = LinearHead(
        DURATION_OUTPUTS, np.zeros((dim, 4)), np.array([steps, disc, p_stop * disc, (1 - p_stop) * disc]), np.full(4, -inf), np.full(4, inf)
    )
    if p_stop >= 1.0:
        outcome = SoftmaxHead((0,), np.zeros((dim, 1)), np.zeros(1))
    else:
        outcome = SoftmaxHead((0, 1), np.zeros((dim, 2)), np.array([0.0, np.log((1 - p_stop) / p_stop)]))
    duration = DurationModel(fmap, dur_head, outcome, gamma)
    rw = np.stack([np.asarray(reward_w, float), np.zeros(dim)], axis=1)
    reward = RewardModel(fmap, LinearHead(REWARD_OUTPUTS, rw, np.array([reward_b, 0.0]), np.full(2, -inf), np.full(2, inf)), gamma, "kinetome/Test-v0")
    end_state = None
    if end_m is not None:
        names = component_names((name,), ((dim,),))
        c = np.zeros(dim) if end_c is None else np.asarray(end_c, float)
        res = np.zeros((1, dim)) if residuals is None else residuals
        head = LinearHead(names, np.asarray(end_m, float).T, c, np.full(dim, -inf), np.full(dim, inf))
        end_state = EndStateModel(fmap, (name,), ((dim,),), head, res, np.full(dim, -inf), np.full(dim, inf))
    end_timed_out = None
    if timeout_m is not None:
        names = component_names((name,), ((dim,),))
        head = LinearHead(names, np.asarray(timeout_m, float).T, np.zeros(dim), np.full(dim, -inf), np.full(dim, inf))
        end_timed_out = EndStateModel(fmap, (name,), ((dim,),), head, np.zeros((1, dim)), np.full(dim, -inf), np.full(dim, inf), outcome="timed_out")
    meta = ModelsMeta(
        skill_ref=ref,
        env_id="kinetome/Test-v0",
        gamma=gamma,
        episodes=100,
        outcomes={"stopped": 100, "timed_out": 0, "env_ended": 0, "refused": 0},
        fitted_at="2024-01-01T00:00:00Z",
        features=(name,),
        end_quantities=(name,) if end_m is not None or timeout_m is not None else (),
    )
    return OptionModels(duration, reward, end_state, meta, end_timed_out)


def random_models(seed: int, *, expansion: str = "linear", with_end_state: bool = True, with_timed_out: bool = False) -> OptionModels:
    """Models with random weights and residuals, for file round trips."""
    rng = np.random.default_rng(seed)
    dim = 3
    fmap = identity_map(dim=dim, expansion=expansion, rng=rng)
    p = fmap.n_features
    fmap = FeatureMap(fmap.quantities, fmap.shapes, rng.normal(size=dim), rng.uniform(0.5, 2, dim), expansion, fmap.rff_weights, fmap.rff_phase)
    errors = {"duration": {"r2": 0.5, "rmse": 1.25, "n": 10}, "discount": {"r2": None, "rmse": 0.0, "n": 10, "note": "constant"}}
    duration = DurationModel(
        fmap,
        LinearHead(DURATION_OUTPUTS, rng.normal(size=(p, 4)), rng.normal(size=4), np.array([1.0, 0, 0, 0]), np.array([50.0, 1, 1, 1])),
        SoftmaxHead((0, 1, 2), rng.normal(size=(p, 3)), rng.normal(size=3)),
        0.97,
        errors,
    )
    reward = RewardModel(fmap, LinearHead(REWARD_OUTPUTS, rng.normal(size=(p, 2)), rng.normal(size=2), -np.full(2, 9.0), np.full(2, 9.0)), 0.97, "kinetome/Test-v0", "heavy", {"discounted_return": {"r2": 0.1, "rmse": 2.0, "n": 10}})
    end_state = None
    if with_end_state:
        names = component_names(("y", "h"), ((2,), ()))
        end_state = EndStateModel(
            fmap, ("y", "h"), ((2,), ()),
            LinearHead(names, rng.normal(size=(p, 3)), rng.normal(size=3), np.array([-1.0, -np.inf, 0.0]), np.array([1.0, np.inf, 2.0])),
            rng.normal(size=(40, 3)),
            np.array([-1.0, -np.inf, 0.0]),
            np.array([1.0, np.inf, 2.0]),
            {"coverage_90": {"mean": 0.9}},
        )
    end_timed_out = None
    if with_timed_out:
        names = component_names(("y", "h"), ((2,), ()))
        end_timed_out = EndStateModel(
            fmap, ("y", "h"), ((2,), ()),
            LinearHead(names, rng.normal(size=(p, 3)), rng.normal(size=3), np.full(3, -np.inf), np.full(3, np.inf)),
            rng.normal(size=(25, 3)), np.full(3, -np.inf), np.full(3, np.inf), {"n_train": 25}, "timed_out",
        )
    meta = ModelsMeta(
        skill_ref="reach@3", env_id="kinetome/Test-v0", gamma=0.97, episodes=120,
        outcomes={"stopped": 80, "timed_out": 20, "env_ended": 10, "refused": 10},
        fitted_at="2024-05-06T07:08:09Z", features=("x",), end_quantities=("y", "h") if with_end_state or with_timed_out else (),
        variant="heavy", variant_digest="ab" * 32, seed=seed,
    )
    return OptionModels(duration, reward, end_state, meta, end_timed_out)

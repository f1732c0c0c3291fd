"""Monte Carlo fitting of option models from synthetic rollouts with known answers."""

from __future__ import annotations

import json

import numpy as np
import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.option_models import OptionModels, predict_chain
from kinetome.library.runtime.records import EndReason
from kinetome.trainers.fitting import fit_option_models

try:  # tests/trainers is a package when it has an __init__.py, a plain folder otherwise
    from .synthetic_rollouts import discounted_constant_return, geometric_segment, rollout, segment
except ImportError:
    from synthetic_rollouts import discounted_constant_return, geometric_segment, rollout, segment

STAMP = "2024-01-01T00:00:00Z"


def test_discounted_return_convention_identity() -> None:
    # Convention: k >= 1 steps, rewards r at steps 0..k-1:
    # sum_t gamma^t r = r (1 - gamma^k)/(1 - gamma), and for k ~ Geometric(b)
    # E[...] = r / (1 - gamma (1 - b)) (option models, Sutton, Precup & Singh 1999, from memory).
    gamma, b, r = 0.99, 0.1, 2.0
    for k in (1, 2, 7, 50):
        explicit = sum(gamma**t * r for t in range(k))
        assert discounted_constant_return(r, np.array([k]), gamma)[0] == pytest.approx(explicit, rel=1e-13)
    ks = np.arange(1, 4000)
    pk = (1 - b) ** (ks - 1) * b  # geometric pmf, support k >= 1
    assert np.sum(pk * discounted_constant_return(r, ks, gamma)) == pytest.approx(r / (1 - gamma * (1 - b)), rel=1e-12)
    assert np.sum(pk * gamma**ks) == pytest.approx(b * gamma / (1 - (1 - b) * gamma), rel=1e-12)


def test_geometric_option_models_match_closed_forms() -> None:
    # Constant termination probability b per step (Sutton, Precup & Singh 1999 option
    # models, from memory; geometric distribution, closed forms derived here): E[k] = 1/b, E[gamma^k] = b gamma / (1 - (1-b) gamma)
    # = 0.908257 for b = 0.1, gamma = 0.99, and E[return] = r / (1 - gamma (1 - b)).
    # 100k episodes, 25k held out: the fit uses 75k; se of E[k] ~ 9.5/sqrt(75k) = 0.035
    # (0.35%), of E[gamma^k] ~ 0.03%; 1% is ~3 se for steps and far more for the rest.
    b, gamma, r = 0.1, 0.99, 1.5
    models = fit_option_models(rollout([geometric_segment(100_000, b, r, gamma, seed=11)], gamma), features=("x",), seed=0, fitted_at=STAMP)
    # Evaluated on a grid over the bulk of the initial-states distribution x ~ N(0, I), |x_i| <= 1:
    # far in the tails the quadratic features amplify sampling noise (2% at |x| = 3.3).
    g = np.linspace(-1.0, 1.0, 5)
    start = {"x": np.stack(np.meshgrid(g, g), axis=-1).reshape(-1, 2)}
    dur = models.duration.predict(start)
    assert b * gamma / (1 - (1 - b) * gamma) == pytest.approx(0.908257, abs=5e-7)
    np.testing.assert_allclose(dur["duration"], 1 / b, rtol=0.01)
    np.testing.assert_allclose(dur["discount"], b * gamma / (1 - (1 - b) * gamma), rtol=0.01)
    np.testing.assert_allclose(dur["stop_discount"], dur["discount"], rtol=1e-12)  # every episode stopped
    assert np.all(dur["timeout_discount"] == 0.0)
    np.testing.assert_allclose(models.reward.expected_return(start), r / (1 - gamma * (1 - b)), rtol=0.01)
    np.testing.assert_allclose(models.reward.predict(start)["reward"], r / b, rtol=0.01)
    # Never seen in training, so never zero: each unseen outcome gets the zero-failure bound 1 - 0.05^(1/n).
    floor = 1 - 0.05 ** (1 / models.duration.errors["n_train"])
    np.testing.assert_allclose(dur["p_timed_out"], floor)
    np.testing.assert_allclose(dur["p_stopped"], 1 - 2 * floor)
    # k does not depend on the start state: held-out R^2 is ~0 (not a fit failure)
    assert abs(models.duration.errors["duration"]["r2"]) < 0.01
    assert models.outcome_fractions()["stopped"] == 1.0


def test_end_state_intervals_are_calibrated_on_linear_gaussian_data() -> None:
    # end = A s + c + N(0, diag(sigma^2)), homoscedastic. n = 4000 episodes, 1000 held out:
    # binomial sd of a 90% coverage estimate sqrt(0.9*0.1/1000) = 0.0095 plus ~0.006 from
    # the 3000-row conformal pool, so the band 85-95% is > 4 sd wide on each side.
    rng = np.random.default_rng(5)
    n, gamma = 4000, 0.98
    s = rng.normal(size=(n, 3))
    a = np.array([[1.0, 0.5, 0.0], [0.0, -1.0, 0.3], [0.2, 0.2, 0.2]])
    end = s @ a.T + np.array([0.5, -1.0, 0.0]) + rng.normal(size=(n, 3)) * np.array([0.05, 0.3, 1.0])
    steps = rng.integers(5, 30, size=n)
    seg = segment("lin@1", {"s": s}, {"e": end}, np.zeros(n), steps, 0.0, gamma)
    models = fit_option_models(rollout([seg], gamma), features=("s",), seed=3, fitted_at=STAMP)
    cov = models.end_state.errors["coverage_90"]
    assert models.end_state.errors["n_held_out"] == 1000
    for name, c in cov["per_component"].items():
        assert 0.85 <= c <= 0.95, (name, c)
    # the mean is the linear map (R^2 near the noise-limited optimum)
    comps = models.end_state.errors["components"]
    assert comps["e[0]"]["r2"] > 0.99 and comps["e[0]"]["rmse"] == pytest.approx(0.05, rel=0.1)
    # samples: spread of draws around the mean matches the noise sd (10% at 40k draws)
    start = {"s": np.zeros((40, 3))}
    draws = models.end_state.sample(start, np.random.default_rng(0), 1000)["e"]
    assert draws.shape == (40, 1000, 3)
    np.testing.assert_allclose(draws.reshape(-1, 3).std(axis=0), [0.05, 0.3, 1.0], rtol=0.1)
    np.testing.assert_allclose(models.end_state.predict(start)["e"][0], [0.5, -1.0, 0.0], atol=0.05)
    lo, hi = models.end_state.interval(start, level=0.9)
    # Gaussian 90% half-width is 1.645 sigma (normal quantile, any table)
    np.testing.assert_allclose((hi["e"] - lo["e"])[0] / 2, 1.645 * np.array([0.05, 0.3, 1.0]), rtol=0.1)


def test_end_state_samples_respect_the_envelope() -> None:
    rng = np.random.default_rng(2)
    n, gamma = 600, 0.99
    s = rng.uniform(-1, 1, size=(n, 1))
    end = np.clip(s + rng.normal(scale=0.5, size=(n, 1)), -1.0, 1.0)
    seg = segment("clip@1", {"s": s}, {"q": end}, np.zeros(n), np.full(n, 10), 0.0, gamma)
    models = fit_option_models(rollout([seg], gamma), features=("s",), envelope={"q": (-1.0, 1.0)}, fitted_at=STAMP)
    start = {"s": np.array([[0.95], [-0.95]])}
    draws = models.end_state.sample(start, np.random.default_rng(0), 500)["q"]
    assert draws.min() >= -1.0 and draws.max() <= 1.0
    assert np.any(draws == 1.0)  # clipping happened: without it draws exceed the envelope
    lo, hi = models.end_state.interval(start)
    assert lo["q"].min() >= -1.0 and hi["q"].max() <= 1.0


def test_timeouts_are_modelled_by_state_and_kept_out_of_end_states() -> None:
    # P(timed out | s) = sigmoid(3 s - 1); timed-out episodes end far away (y = 100).
    # The stopped end-state model must not see them, and the logistic fit must
    # beat the constant-rate baseline on held-out log loss.
    rng = np.random.default_rng(9)
    n, gamma, cap = 3000, 0.97, 50
    s = rng.normal(size=(n, 1))
    timed_out = rng.random(n) < 1 / (1 + np.exp(-(3 * s[:, 0] - 1)))
    reason = np.where(timed_out, int(EndReason.TIMED_OUT), int(EndReason.STOPPED))
    steps = np.where(timed_out, cap, rng.integers(1, 20, size=n))
    end = np.where(timed_out[:, None], 100.0, 2 * s + 0.01 * rng.normal(size=(n, 1)))
    seg = segment("to@1", {"s": s}, {"y": end}, reason, steps, 1.0, gamma)
    models = fit_option_models(rollout([seg], gamma), features=("s",), expansion="linear", seed=1, fitted_at=STAMP)
    grid = {"s": np.array([[-1.0], [0.0], [1.0]])}
    truth = 1 / (1 + np.exp(-(3 * grid["s"][:, 0] - 1)))
    # 2,250 training rows: the logistic coefficients have sd ~0.1, so probabilities are
    # within ~0.03; tolerance 0.06 (common practice: ~2 sd).
    np.testing.assert_allclose(models.duration.timeout_probability(grid), truth, atol=0.06)
    out = models.duration.errors["outcome"]
    assert out["log_loss"] < out["baseline_log_loss"] - 0.1
    assert models.duration.errors["timeout"]["brier"] < 0.2
    np.testing.assert_allclose(models.end_state.predict(grid)["y"][:, 0], [-2.0, 0.0, 2.0], atol=0.01)
    fr = models.outcome_fractions()
    assert fr["stopped"] + fr["timed_out"] == pytest.approx(1.0)
    assert fr["timed_out"] == pytest.approx(np.mean(timed_out))
    # timed-out turns (all 50 steps) get their own end-state model
    np.testing.assert_allclose(models.end_state_timed_out.predict(grid)["y"][:, 0], 100.0, atol=1e-9)
    pred = models.duration.predict(grid)
    # E[gamma^k 1{timed out}] = P(timed out) gamma^50 since every timeout runs 50 steps. The
    # linear head cannot follow the sigmoid pointwise, but ridge with an intercept matches
    # the mean over the initial-states distribution (fresh draws: sd of the mean ~0.002).
    fresh = {"s": np.random.default_rng(10).normal(size=(20_000, 1))}
    p_fresh = 1 / (1 + np.exp(-(3 * fresh["s"][:, 0] - 1)))
    td_mean = models.duration.predict(fresh)["timeout_discount"].mean()
    assert td_mean == pytest.approx(p_fresh.mean() * gamma**cap, abs=0.01)
    np.testing.assert_allclose(pred["handoff_discount"], pred["stop_discount"] + pred["timeout_discount"])


def test_refused_and_not_reached_episodes_are_left_out() -> None:
    rng = np.random.default_rng(4)
    n, gamma = 400, 0.99
    s = rng.normal(size=(n, 1))
    reason = np.zeros(n, dtype=np.int8)
    reason[:50] = int(EndReason.REFUSED)
    reason[50:80] = int(EndReason.NOT_REACHED)
    steps = np.where(reason == 0, 10, 0)
    seg = segment("r@1", {"s": s}, {"y": s}, reason, steps, 1.0, gamma)
    models = fit_option_models(rollout([seg], gamma), features=("s",), fitted_at=STAMP)
    assert models.meta.outcomes == {"stopped": 320, "timed_out": 0, "env_ended": 0, "refused": 50}
    assert models.meta.episodes == 370
    np.testing.assert_allclose(models.duration.expected_duration({"s": np.zeros((2, 1))}), 10.0)
    assert models.duration.errors["duration"]["r2"] is None  # constant target: R^2 undefined, RMSE instead
    assert models.duration.errors["duration"]["rmse"] < 1e-9


def test_fitting_is_deterministic_and_round_trips() -> None:
    seg = geometric_segment(800, 0.2, 1.0, 0.9, seed=3)
    a = fit_option_models(rollout([seg], 0.9, meta={"variant": {"name": "heavy", "digest": "d1"}}), features=("x",), seed=5, fitted_at=STAMP)
    b = fit_option_models(rollout([seg], 0.9, meta={"variant": {"name": "heavy", "digest": "d1"}}), features=("x",), seed=5, fitted_at=STAMP)
    assert a.to_files() == b.to_files()
    assert OptionModels.from_files(a.to_files()).to_files() == a.to_files()
    assert (a.meta.variant, a.meta.variant_digest, a.reward.variant) == ("heavy", "d1", "heavy")
    summary = a.summary()
    assert set(summary) >= {"duration", "reward", "end_state", "outcomes", "gamma", "episodes"}
    assert json.loads(json.dumps(summary, allow_nan=False)) == summary  # the store keeps it as JSON


def test_rff_expansion_fits_a_nonlinear_duration() -> None:
    # 14 inputs -> "auto" picks random Fourier features; E[k | s] = 20 + 10 sin(s_0).
    rng = np.random.default_rng(6)
    n, gamma = 3000, 0.99
    s = rng.normal(size=(n, 14))
    steps = np.maximum(1, np.round(20 + 10 * np.sin(s[:, 0]) + rng.normal(size=n))).astype(np.int64)
    seg = segment("nl@1", {"s": s}, {"y": s[:, :2]}, np.zeros(n), steps, 1.0, gamma)
    models = fit_option_models(rollout([seg], gamma), features=("s",), fitted_at=STAMP)
    assert models.duration.features.expansion == "rff"
    assert models.duration.errors["duration"]["r2"] > 0.7  # the noise-free optimum is 50/(50+1) ~ 0.98


def test_chain_prediction_from_fitted_models_matches_closed_form() -> None:
    # Two synthetic skills: a maps s -> s + 1 in 10 steps, b maps s -> 2 s in 4 steps with
    # reward s_0 per step. Chain return from s: 10-step sum of 1 + gamma^10 * 4-step sum of (s_0 + 1).
    rng = np.random.default_rng(8)
    n, gamma = 2000, 0.9
    s = rng.normal(size=(n, 2))
    seg_a = segment("a@1", {"s": s}, {"s": s + 1.0}, np.zeros(n), np.full(n, 10), 1.0, gamma)
    s2 = rng.normal(size=(n, 2)) + 1.0
    seg_b = segment("b@1", {"s": s2}, {"s": 2 * s2}, np.zeros(n), np.full(n, 4), s2[:, 0], gamma)
    ma = fit_option_models(rollout([seg_a], gamma), features=("s",), fitted_at=STAMP)
    mb = fit_option_models(rollout([seg_b], gamma), features=("s",), fitted_at=STAMP)
    x = np.array([[0.0, 0.0], [0.5, -0.5]])
    pred = predict_chain([ma, mb], {"s": x}, rng=np.random.default_rng(0), samples=200)
    # a never timed out nor ended in training, so each of those outcomes keeps the zero-failure
    # floor f = 1 - 0.05^(1/n_train) (never zero): b is reached with probability p = 1 - 2 f.
    p = 1 - 2 * (1 - 0.05 ** (1 / ma.duration.errors["n_train"]))
    ret = discounted_constant_return(1.0, np.array(10), gamma) + gamma**10 * (x[:, 0] + 1) * discounted_constant_return(1.0, np.array(4), gamma)
    assert pred.steps.mean == pytest.approx(10.0 + p * 4.0, rel=1e-9)
    # The floor moves the discounted quantities by less than its own weight 1 - p (0.4% here).
    assert pred.discounted_return.mean == pytest.approx(ret.mean(), rel=1 - p)
    assert pred.discount.mean == pytest.approx(gamma**14, rel=1 - p)


BAD_CALLS = [
    ({"segment_index": 3}, "segment_index must be in [0, 0] for this 1-skill rollout, got 3"),
    ({"gamma": 0.9}, "gamma must equal the rollout's gamma 0.99 because its discounted returns were summed with it, got 0.9"),
    ({"holdout": 0.0}, "holdout must be a fraction in (0, 1), got 0.0"),
    ({"features": ("nope",)}, "features must be recorded quantities, got unknown ['nope']; known: ['x']"),
    ({"features": ()}, "features must name at least one quantity, got none"),
    ({"end_quantities": ("x",)}, "end_quantities must be recorded quantities, got unknown ['x']; known: ['y']"),
    ({"expansion": "cubic"}, "expansion must be one of ('auto', 'linear', 'poly2', 'rff'), got 'cubic'"),
]


@pytest.mark.parametrize("kwargs, expected", BAD_CALLS)
def test_fit_rejects_bad_arguments(kwargs: dict, expected: str) -> None:
    ro = rollout([geometric_segment(50, 0.2, 1.0, 0.99, seed=0)], 0.99)
    with pytest.raises(InvalidInputError) as info:
        fit_option_models(ro, **kwargs)
    assert expected in str(info.value)


def test_fit_rejects_too_few_episodes_and_inconsistent_discounts() -> None:
    ro = rollout([geometric_segment(9, 0.2, 1.0, 0.99, seed=0)], 0.99)
    with pytest.raises(InvalidInputError, match=r"must have at least 10 episodes that ran, got 9"):
        fit_option_models(ro)
    seg = geometric_segment(50, 0.2, 1.0, 0.95, seed=0)  # discounts use 0.95
    with pytest.raises(InvalidInputError, match=r"segment discount must equal gamma\*\*steps with gamma=0.99"):
        fit_option_models(rollout([seg], 0.99))


def test_fit_rejects_non_finite_starts_and_matrix_end_quantities() -> None:
    seg = geometric_segment(50, 0.2, 1.0, 0.99, seed=0)
    seg.start_state["x"][3, 1] = np.nan
    with pytest.raises(InvalidInputError, match=r"start states must be finite, got NaN/Inf in \['x'\]"):
        fit_option_models(rollout([seg], 0.99))
    seg = geometric_segment(50, 0.2, 1.0, 0.99, seed=0)
    seg.end_state["tip_jac"] = np.zeros((50, 3, 2))
    with pytest.raises(InvalidInputError, match=r"end_quantities must be scalars or vectors, got matrix-valued \['tip_jac'\]"):
        fit_option_models(rollout([seg], 0.99), end_quantities=("y", "tip_jac"))


def test_no_end_state_model_without_enough_stopped_episodes() -> None:
    rng = np.random.default_rng(0)
    n = 40
    reason = np.full(n, int(EndReason.TIMED_OUT))
    reason[:5] = int(EndReason.STOPPED)
    seg = segment("t@1", {"x": rng.normal(size=(n, 1))}, {"y": rng.normal(size=(n, 1))}, reason, np.full(n, 30), 1.0, 0.99)
    models = fit_option_models(rollout([seg], 0.99), fitted_at=STAMP)
    assert models.end_state is None
    assert models.end_state_timed_out is not None  # 35 timeouts: enough for their own model
    assert "no stopped end-state model: " in models.summary()["notes"][0]
    again = OptionModels.from_files(models.to_files())
    assert again.end_state is None and again.end_state_timed_out.outcome == "timed_out"

"""Feature maps, heads, metrics and conformal offsets: the pieces option models are made of."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from kinetome.library.option_models import (
    OUTCOME_CODES,
    FeatureMap,
    LinearHead,
    SoftmaxHead,
    classification_errors,
    component_names,
    conformal_offsets,
    default_quantities,
    envelope_arrays,
    flatten_states,
    regression_errors,
    unflatten_states,
)
from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.library.runtime.records import EndReason


def test_outcome_codes_mirror_end_reason() -> None:
    # option_models keeps literal codes to avoid importing the runtime; they must agree.
    assert OUTCOME_CODES == {"stopped": int(EndReason.STOPPED), "timed_out": int(EndReason.TIMED_OUT), "env_ended": int(EndReason.ENV_ENDED)}


def test_poly2_features_are_inputs_and_pairwise_products() -> None:
    rng = np.random.default_rng(0)
    fmap = FeatureMap(("a", "h"), ((2,), ()), np.array([1.0, -1.0, 0.5]), np.array([2.0, 1.0, 4.0]), "poly2")
    values = {"a": rng.normal(size=(5, 2)), "h": rng.normal(size=5)}
    z = (np.column_stack([values["a"], values["h"]]) - fmap.center) / fmap.scale
    expect = [z[:, 0], z[:, 1], z[:, 2]]
    for i in range(3):
        for j in range(i, 3):
            expect.append(z[:, i] * z[:, j])
    np.testing.assert_allclose(fmap(values), np.column_stack(expect), rtol=1e-15)
    assert fmap.n_features == 9
    assert fmap.input_names == ("a[0]", "a[1]", "h")


def test_names_flatten_and_unflatten_are_inverse() -> None:
    values = {"m": np.arange(12.0).reshape(2, 2, 3), "s": np.array([1.0, 2.0])}
    flat = flatten_states(values, ("m", "s"), ((2, 3), ()))
    assert flat.shape == (2, 7)
    back = unflatten_states(flat, ("m", "s"), ((2, 3), ()))
    np.testing.assert_array_equal(back["m"], values["m"])
    np.testing.assert_array_equal(back["s"], values["s"])
    assert component_names(("m", "s"), ((2, 3), ()))[:2] == ("m[0,0]", "m[0,1]")
    assert default_quantities({"qpos": np.zeros((2, 3)), "h": np.zeros(2), "tip_jac": np.zeros((2, 3, 3))}) == ("qpos", "h")


@pytest.mark.parametrize(
    "values, expected",
    [
        ({"b": np.zeros((3, 2))}, "start states must contain quantity 'a'; got ['b']"),
        ({"a": np.zeros((3, 3))}, "start states['a'] must have shape (B, 2) (batch first), got (3, 3)"),
        ({"a": np.zeros(2)}, "start states['a'] must have shape (B, 2) (batch first), got (2,)"),
    ],
)
def test_feature_map_rejects_bad_states(values, expected: str) -> None:
    fmap = FeatureMap(("a",), ((2,),), np.zeros(2), np.ones(2))
    with pytest.raises((KeyError, ValueError)) as info:
        fmap(values)
    assert expected in str(info.value)


@pytest.mark.parametrize(
    "build, expected",
    [
        (lambda: FeatureMap((), (), np.zeros(0), np.ones(0)), "feature quantities must name at least one quantity"),
        (lambda: FeatureMap(("a",), ((2,),), np.zeros(3), np.ones(2)), "feature center must have shape (2,), got (3,)"),
        (lambda: FeatureMap(("a",), ((2,),), np.zeros(2), np.array([1.0, 0.0])), "feature scale must be > 0, got min 0.0"),
        (lambda: FeatureMap(("a",), ((2,),), np.zeros(2), np.ones(2), "cubic"), "feature expansion must be one of"),
        (lambda: FeatureMap(("a",), ((2,),), np.zeros(2), np.ones(2), "rff"), "rff expansion needs rff_weights"),
        (lambda: FeatureMap(("a", "a"), ((2,), (2,)), np.zeros(4), np.ones(4)), "feature quantities must be distinct"),
        (lambda: FeatureMap(("a",), ((2,),), np.array([0.0, np.nan]), np.ones(2)), "feature center must be finite"),
        (lambda: LinearHead(("y",), np.zeros((3, 2)), np.zeros(1), np.zeros(1), np.ones(1)), "head weights must have shape (p, 1)"),
        (lambda: LinearHead(("y",), np.zeros((3, 1)), np.zeros(1), np.ones(1), np.zeros(1)), "head low must be <= high"),
        (lambda: LinearHead((), np.zeros((3, 0)), np.zeros(0), np.zeros(0), np.zeros(0)), "at least one output"),
        (lambda: SoftmaxHead((0, 0), np.zeros((3, 2)), np.zeros(2)), "softmax classes must be distinct"),
        (lambda: SoftmaxHead((0, 1), np.zeros((3, 2)), np.zeros(3)), "softmax bias must have shape (2,), got (3,)"),
    ],
)
def test_parts_validate_on_construction(build, expected: str) -> None:
    with pytest.raises(ValueError) as info:
        build()
    assert expected in str(info.value)


def test_softmax_head_gives_zero_for_unseen_classes_and_rows_sum_to_one() -> None:
    rng = np.random.default_rng(1)
    head = SoftmaxHead((0, 2), rng.normal(size=(4, 2)), np.zeros(2))
    x = rng.normal(size=(6, 4)) * 50  # large logits must not overflow
    p = head(x)
    np.testing.assert_allclose(p.sum(axis=1), 1.0, rtol=1e-14)
    assert np.all(head.probability(x, 1) == 0.0)
    np.testing.assert_array_equal(head.probability(x, 2), p[:, 1])


def test_r2_matches_scipy_linregress() -> None:
    # Outside reference: for a least-squares line, R^2 equals the squared
    # correlation scipy.stats.linregress reports (rvalue ** 2).
    rng = np.random.default_rng(2)
    x = rng.normal(size=200)
    y = 3 * x + rng.normal(size=200)
    fit = stats.linregress(x, y)
    err = regression_errors(y, fit.intercept + fit.slope * x)
    assert err["r2"] == pytest.approx(fit.rvalue**2, rel=1e-12)
    assert err["rmse"] == pytest.approx(np.sqrt(np.mean((y - fit.intercept - fit.slope * x) ** 2)), rel=1e-12)


def test_r2_is_undefined_for_a_constant_target() -> None:
    err = regression_errors(np.full(10, 0.9), np.full(10, 0.91))
    assert err["r2"] is None and "constant" in err["note"]
    assert err["rmse"] == pytest.approx(0.01, rel=1e-9)


def test_log_loss_and_brier_by_their_definitions() -> None:
    # Log loss: mean -log p(true class); Brier (1950, from memory): mean over rows of sum_k (p_k - y_k)^2.
    probs = np.array([[0.8, 0.2], [0.3, 0.7], [0.5, 0.5]])
    labels = np.array([0, 0, 1])
    err = classification_errors(labels, probs, (0, 1), baseline=np.array([0.5, 0.5]))
    assert err["log_loss"] == pytest.approx(-(np.log(0.8) + np.log(0.3) + np.log(0.5)) / 3, rel=1e-12)
    assert err["brier"] == pytest.approx((0.08 + 0.98 + 0.5) / 3, rel=1e-12)
    assert err["baseline_log_loss"] == pytest.approx(np.log(2), rel=1e-12)
    # a label the model never saw: probability 0, log loss capped, Brier adds 1
    err = classification_errors(np.array([1]), np.array([[1.0]]), (0,))
    assert err["brier"] == pytest.approx(2.0) and err["log_loss"] == pytest.approx(-np.log(1e-15))


def test_conformal_offsets_use_finite_sample_ranks() -> None:
    # Split conformal (Lei et al. 2018, from memory): ranks floor((n+1) a/2) and ceil((n+1)(1-a/2)).
    res = np.arange(1.0, 20.0)[:, None]  # n = 19
    lo, hi = conformal_offsets(res, 0.9)  # ranks 1 and 19
    assert (lo[0], hi[0]) == (1.0, 19.0)
    lo, hi = conformal_offsets(res, 0.8)  # ranks 2 and 18
    assert (lo[0], hi[0]) == (2.0, 18.0)
    lo, hi = conformal_offsets(res[:5], 0.9)  # too few for 90%: unbounded
    assert lo[0] == -np.inf and hi[0] == np.inf
    with pytest.raises(ValueError, match="interval level must be in"):
        conformal_offsets(res, 1.0)


def test_conformal_intervals_cover_exchangeable_draws() -> None:
    # Guarantee (Lei et al. 2018, from memory): P(new draw inside) >= level for exchangeable draws.
    # Averaged over 400 seeded pools of n = 39 the coverage estimate has sd ~0.0015,
    # and the exact value for continuous draws is (hi_rank - lo_rank)/(n+1) = 0.9.
    rng = np.random.default_rng(3)
    hits = []
    for _ in range(400):
        pool = rng.standard_t(3, size=(39, 1))
        lo, hi = conformal_offsets(pool, 0.9)
        new = rng.standard_t(3, size=200)
        hits.append(np.mean((new >= lo[0]) & (new <= hi[0])))
    assert np.mean(hits) == pytest.approx(0.9, abs=0.006)


def test_envelope_from_mapping_or_layout() -> None:
    layout = StateLayout((
        Quantity("qpos", (2,), "rad", "joint angles", low=(-1.0, -2.0), high=(1.0, 2.0)),
        Quantity("h", (), "m", "height"),
    ))
    lo, hi = envelope_arrays(layout, ("qpos", "h"), ((2,), ()))
    np.testing.assert_array_equal(lo, [-1, -2, -np.inf])
    np.testing.assert_array_equal(hi, [1, 2, np.inf])
    lo, hi = envelope_arrays({"h": (0.0, None)}, ("qpos", "h"), ((2,), ()))
    np.testing.assert_array_equal(lo, [-np.inf, -np.inf, 0.0])
    with pytest.raises(ValueError, match="envelope of 'h' must have low <= high"):
        envelope_arrays({"h": (1.0, 0.0)}, ("h",), ((),))


def test_option_models_import_no_heavy_libraries() -> None:
    # `kinetome show` reads option models; it must not pull in torch, mujoco or z3.
    import subprocess
    import sys

    code = (
        "import sys, kinetome.library.option_models as m; "
        "print(sorted({k.split('.')[0] for k in sys.modules} & {'torch', 'mujoco', 'z3', 'scipy', 'gymnasium'}))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"

"""Batched numpy evaluation against a slow per-row reference in plain Python floats."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from kinetome.library.predicates import Predicate, evaluate_node, parse_predicate, prepare_values
from predicate_reference import SHAPES, booleans, numbers, reference_batch

NAMES = {
    "qpos": (3,),
    "qvel": (3,),
    "fingertip": (3,),
    "fingertip_vel": (3,),
    "target": (3,),
    "tolerance": (),
    "torso_height": (),
    "foot_contact": (2,),
}

EXPRESSIONS = [
    "norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05",
    "all(abs(qvel) <= 1.0) and torso_height > 0.8",
    "qpos[0] >= -0.5 and not any(foot_contact > 0)",
    "norm(fingertip - [0.30, 0.0, 0.45]) < tolerance",
    "0.2 < torso_height < 1.5",
    "all(-1 <= qpos <= 1) or max(qvel) - min(qvel) < 0.5",
    "qpos[-1] / torso_height != 2 and sqrt(torso_height) ** 3 < 1",
    "any(min(qpos, qvel, 0.5) == 0.5)",
    "(fingertip - target)[1] * tolerance > -0.1",
]


def _random_values(rng: np.random.Generator, shapes: dict, batch: int, *, unbatched=()) -> dict:
    """Values mixing round numbers (exact ties, zeros for division), random floats and NaN."""
    grid = np.array([-1.0, -0.5, 0.0, 0.5, 1.0, 2.0])
    out = {}
    for name, shape in shapes.items():
        full = (batch, *shape) if name not in unbatched else shape
        x = rng.normal(0.0, 1.0, size=full)
        pick = rng.random(full)
        x = np.where(pick < 0.3, rng.choice(grid, size=full), x)
        x = np.where(pick > 0.97, np.nan, x)
        out[name] = x
    return out


@pytest.mark.parametrize("text", EXPRESSIONS)
def test_table_matches_reference(text: str) -> None:
    rng = np.random.default_rng(7)
    pred = parse_predicate(text, NAMES)
    batch = 400
    values = _random_values(rng, NAMES, batch, unbatched=("target", "tolerance"))
    # half the rows near the target and slow, so reaching clauses hold on some rows
    values["target"] = np.array([0.3, 0.0, 0.45])
    values["fingertip"][::2] = values["target"] + 0.01 * rng.normal(size=(batch // 2, 3))
    values["fingertip_vel"][::2] *= 0.01
    values["tolerance"] = np.float64(0.02)
    got = pred.evaluate(values)
    expected = reference_batch(pred.root, values, batch, NAMES)
    assert got.shape == (batch,) and got.dtype == bool
    assert got.tolist() == expected
    # both outcomes occur, so the comparison is not vacuous
    assert 0 < got.sum() < batch or text.startswith("any(min")


@settings(max_examples=100, deadline=None, derandomize=True, database=None)
@given(booleans(depth=4), st.integers(0, 2**32 - 1))
def test_random_predicates_match_reference(root, seed: int) -> None:
    pred = Predicate(root, SHAPES)
    batch = 16
    values = _random_values(np.random.default_rng(seed), SHAPES, batch, unbatched=("gain",))
    assert pred.evaluate(values, batch=batch).tolist() == reference_batch(root, values, batch, SHAPES)


@settings(max_examples=100, deadline=None, derandomize=True, database=None)
@given(st.sampled_from([(), (3,), (2, 3)]).flatmap(lambda s: numbers(s, depth=4)), st.integers(0, 2**32 - 1))
def test_random_numbers_match_reference_bit_for_bit(root, seed: int) -> None:
    batch = 8
    values = _random_values(np.random.default_rng(seed), SHAPES, batch)
    arrays, b = prepare_values(values, SHAPES)
    got = np.broadcast_to(evaluate_node(root, arrays), (b, *np.shape(evaluate_node(root, arrays))[1:]))
    expected = np.array(reference_batch(root, values, batch, SHAPES), dtype=np.float64)
    # same operations in the same order on IEEE doubles: equal bit for bit (NaN where NaN)
    assert np.array_equal(got, expected, equal_nan=True)


def test_nan_compares_false_everywhere() -> None:
    names = {"x": ()}
    nan = np.array([np.nan])
    for text in ["x < 1", "x <= 1", "x > 1", "x >= 1", "x == x", "x != 1"]:
        assert parse_predicate(text, names).evaluate({"x": nan}).tolist() == [False], text
    # ...but negation is plain boolean negation
    assert parse_predicate("not x < 1", names).evaluate({"x": nan}).tolist() == [True]


def test_division_by_zero_and_negative_sqrt_are_nan() -> None:
    names = {"x": (), "y": ()}
    values = {"x": np.array([1.0, 0.0, -1.0, 4.0]), "y": np.array([0.0, 0.0, 0.0, 2.0])}
    assert parse_predicate("x / y > 0 or x / y <= 0", names).evaluate(values).tolist() == [
        False, False, False, True
    ]
    sqrt = parse_predicate("sqrt(x) >= 0", names)
    assert sqrt.evaluate(values).tolist() == [True, True, False, True]
    # x ** 0 is 1 even for NaN, as numpy's ones_like gives
    assert parse_predicate("(x / y) ** 0 == 1", names).evaluate(values).tolist() == [True] * 4


def test_parameters_broadcast_with_or_without_batch_axis() -> None:
    pred = parse_predicate("norm(fingertip - target) < tolerance", NAMES)
    tip = np.array([[0.3, 0.0, 0.45], [0.31, 0.0, 0.45], [0.0, 0.0, 0.0]])
    shared = {"fingertip": tip, "target": np.array([0.3, 0.0, 0.45]), "tolerance": np.float64(0.02)}
    assert pred.evaluate(shared).tolist() == [True, True, False]
    per_row = {
        "fingertip": tip,
        "target": np.tile([0.3, 0.0, 0.45], (3, 1)),
        "tolerance": np.array([0.02, 0.005, 1.0]),
    }
    assert pred.evaluate(per_row).tolist() == [True, False, True]
    # nothing batched: one row
    assert pred.evaluate({**shared, "fingertip": tip[0]}).tolist() == [True]


def test_evaluate_checks_its_inputs() -> None:
    pred = parse_predicate("norm(fingertip - target) < tolerance", NAMES)
    good = {"fingertip": np.zeros((4, 3)), "target": np.zeros(3), "tolerance": 0.1}
    with pytest.raises(ValueError, match=r"values must include 'target' \(shape \(3,\)\)"):
        pred.evaluate({"fingertip": np.zeros((4, 3)), "tolerance": 0.1})
    with pytest.raises(ValueError, match=r"value of 'fingertip' must have shape \(B, \*\(3,\)\) or \(3,\), got \(4, 2\)"):
        pred.evaluate({**good, "fingertip": np.zeros((4, 2))})
    with pytest.raises(ValueError, match="batch sizes must agree, got 4 rows for 'fingertip' and 5 for 'tolerance'"):
        pred.evaluate({**good, "tolerance": np.zeros(5)})
    with pytest.raises(ValueError, match="batch sizes must agree, got 3 rows for the batch argument and 4 for"):
        pred.evaluate(good, batch=3)
    with pytest.raises(ValueError, match="batch must be a positive integer, got 0"):
        pred.evaluate(good, batch=0)


def test_batch_argument_for_predicates_without_batched_names() -> None:
    pred = parse_predicate("tolerance > 0.01", NAMES)
    assert pred.evaluate({"tolerance": 0.02}).tolist() == [True]
    assert pred.evaluate({"tolerance": 0.02, "qpos": np.zeros((5, 3))}, batch=5).tolist() == [True] * 5
    assert parse_predicate("1 < 2", NAMES).evaluate({}, batch=3).tolist() == [True] * 3


def test_large_batch_is_vectorised() -> None:
    # 200k rows finish quickly only without a Python loop over rows (common practice bound: < 2 s)
    import time

    pred = parse_predicate("all(abs(qvel) <= 1.0) and norm(fingertip - target) < 0.5", NAMES)
    rng = np.random.default_rng(0)
    values = {"qvel": rng.normal(size=(200_000, 3)), "fingertip": rng.normal(size=(200_000, 3)),
              "target": np.zeros(3)}
    start = time.perf_counter()
    out = pred.evaluate(values)
    assert time.perf_counter() - start < 2.0
    expected = np.all(np.abs(values["qvel"]) <= 1, axis=1) & (np.linalg.norm(values["fingertip"], axis=1) < 0.5)
    assert np.array_equal(out, expected)
    assert math.isclose(out.mean(), expected.mean())

"""explain(): which clause fails, on which quantity, against which bound, by how much."""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinetome.library.predicates import Violation, explain, parse_predicate

NAMES = {
    "qpos": (3,),
    "qvel": (3,),
    "fingertip": (3,),
    "target": (3,),
    "tolerance": (),
    "torso_height": (),
    "foot_contact": (2,),
    "jac": (2, 2),
}


def _one(text: str, values: dict, row: int = 0) -> Violation:
    found = explain(parse_predicate(text, NAMES), values, row)
    assert len(found) == 1, found
    return found[0]


def test_worst_element_of_all() -> None:
    v = _one("all(qvel <= 1.0)", {"qvel": np.array([[0.5, 1.2, 1.8]])})
    assert str(v) == "qvel[2] = 1.8, needs <= 1 (over by 0.8)"
    assert (v.quantity_text, v.relation, v.bound) == ("qvel[2]", "<=", 1.0)
    assert math.isclose(v.margin, 0.8)
    assert v.clause_text == "all(qvel <= 1)"


def test_abs_inside_all_names_the_element() -> None:
    v = _one("all(abs(qvel) <= 1.0)", {"qvel": np.array([[0.5, -2.5, 1.8]])})
    assert str(v) == "abs(qvel[1]) = 2.5, needs <= 1 (over by 1.5)"


def test_norm_against_parameter_bound() -> None:
    values = {"fingertip": np.array([[0.351, 0.0, 0.45]]), "target": np.array([0.3, 0.0, 0.45]),
              "tolerance": 0.02}
    v = _one("norm(fingertip - target) < tolerance", values)
    assert str(v) == "norm(fingertip - target) = 0.051, needs < tolerance = 0.02 (over by 0.031)"
    assert math.isclose(v.value, 0.051) and math.isclose(v.margin, 0.031)
    literal = _one("norm(fingertip - target) < 0.02", values)
    assert str(literal) == "norm(fingertip - target) = 0.051, needs < 0.02 (over by 0.031)"
    assert literal.bound_text == ""


def test_only_failing_clauses_in_order() -> None:
    pred = parse_predicate(
        "all(abs(qvel) <= 1.0) and torso_height > 0.8 and qpos[0] >= -0.5 and not any(foot_contact > 0)",
        NAMES,
    )
    values = {
        "qvel": np.array([[0.1, 0.2, 0.3], [0.1, 0.2, 3.0]]),
        "torso_height": np.array([1.0, 0.5]),
        "qpos": np.array([[0.0, 0, 0], [-0.75, 0, 0]]),
        "foot_contact": np.array([[0.0, 0.0], [0.0, 2.0]]),
    }
    assert explain(pred, values, 0) == []
    found = explain(pred, values, 1)
    assert [str(v) for v in found] == [
        "abs(qvel[2]) = 3, needs <= 1 (over by 2)",
        "torso_height = 0.5, needs > 0.8 (under by 0.3)",
        "qpos[0] = -0.75, needs >= -0.5 (under by 0.25)",
        "foot_contact[1] = 2, needs <= 0 (over by 2)",  # not any(c > 0) reads as all(c <= 0)
    ]
    assert [v.clause_text for v in found] == [str(c) for c in pred.clauses()]
    assert explain(pred, values, -1) == found


def test_chain_with_constant_on_the_left() -> None:
    low = _one("0.2 < torso_height < 1.5", {"torso_height": np.array([0.1])})
    assert str(low) == "torso_height = 0.1, needs > 0.2 (under by 0.1)"
    high = _one("0.2 < torso_height < 1.5", {"torso_height": np.array([1.75])})
    assert str(high) == "torso_height = 1.75, needs < 1.5 (over by 0.25)"
    vector = _one("all(-1 <= qpos <= 1)", {"qpos": np.array([[0.0, -1.5, 1.2]])})
    assert str(vector) == "qpos[1] = -1.5, needs >= -1 (under by 0.5)"


def test_any_names_the_closest_element() -> None:
    v = _one("any(qpos > 0.5)", {"qpos": np.array([[0.1, 0.4, -2.0]])})
    assert str(v) == "qpos[1] = 0.4, needs > 0.5 (under by 0.1)"


def test_or_names_the_closest_part() -> None:
    v = _one("torso_height > 1 or qpos[0] < -0.5", {"torso_height": np.array([0.2]),
                                                    "qpos": np.array([[-0.4, 0, 0]])})
    assert str(v) == "qpos[0] = -0.4, needs < -0.5 (over by 0.1)"


def test_negations_flip_relations() -> None:
    v = _one("not (torso_height >= 1 and qpos[0] > 0)", {"torso_height": np.array([1.25]),
                                                         "qpos": np.array([[0.5, 0, 0]])})
    # not (a and b) == (not a) or (not b): the part closest to holding is named
    assert str(v) == "torso_height = 1.25, needs < 1 (over by 0.25)"
    eq = _one("not torso_height != 2", {"torso_height": np.array([2.5])})
    assert str(eq) == "torso_height = 2.5, needs == 2 (off by 0.5)"
    ne = _one("torso_height != 2", {"torso_height": np.array([2.0])})
    assert str(ne) == "torso_height = 2, needs != 2 (equal)"


def test_two_dimensional_and_vector_bounds() -> None:
    v = _one("all(jac[1] < [0.5, 0.25])", {"jac": np.array([[[0.0, 0.0], [0.0, 1.0]]])})
    assert str(v) == "jac[1][1] = 1, needs < 0.25 (over by 0.75)"
    whole = _one("all(abs(jac) <= 1)", {"jac": np.array([[[0.0, 0.0], [-3.0, 1.0]]])})
    assert str(whole) == "abs(jac[1][0]) = 3, needs <= 1 (over by 2)"


def test_expression_bound_and_difference_quantity() -> None:
    v = _one("(fingertip - target)[2] > qpos[0]", {"fingertip": np.array([[0, 0, 0.4]]),
                                                   "target": np.zeros(3), "qpos": np.array([[0.5, 0, 0]])})
    assert str(v) == "(fingertip - target)[2] = 0.4, needs > qpos[0] = 0.5 (under by 0.1)"


def test_nan_is_reported_as_not_a_number() -> None:
    v = _one("all(qvel <= 1.0)", {"qvel": np.array([[0.5, np.nan, 3.0]])})
    # NaN counts as the worst element
    assert v.quantity_text == "qvel[1]" and math.isnan(v.margin)
    assert str(v) == "qvel[1] = nan, needs <= 1 (not a number)"


def test_row_must_be_in_range() -> None:
    pred = parse_predicate("torso_height > 0", NAMES)
    with pytest.raises(IndexError, match="row must be an integer in -2..1, got 2"):
        explain(pred, {"torso_height": np.array([1.0, 2.0])}, 2)


from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from kinetome.library.predicates import Predicate  # noqa: E402
from predicate_reference import SHAPES, booleans  # noqa: E402

_RELATIONS = {
    "<": lambda a, b: a < b,
    "<=": lambda a, b: a <= b,
    ">": lambda a, b: a > b,
    ">=": lambda a, b: a >= b,
    "==": lambda a, b: a == b,
    "!=": lambda a, b: a != b,
}


@settings(max_examples=80, deadline=None, derandomize=True, database=None)
@given(booleans(depth=3), st.integers(0, 2**32 - 1))
def test_random_explanations_are_consistent(root, seed: int) -> None:
    """Every failing row gets one violation per failing clause, each stating a relation that is false."""
    pred = Predicate(root, SHAPES)
    rng = np.random.default_rng(seed)
    values = {name: rng.choice([-1.0, 0.0, 0.5, 2.0], size=(6, *shape)) for name, shape in SHAPES.items()}
    holds = pred.evaluate(values, batch=6)
    for row in range(6):
        found = explain(pred, values, row, batch=6)
        failing = [str(c) for c in pred.clauses() if not c.evaluate(values, batch=6)[row]]
        assert [v.clause_text for v in found] == failing
        assert bool(found) == (not holds[row])
        for v in found:
            if v.relation == "true" or math.isnan(v.value) or math.isnan(v.bound):
                continue
            assert not _RELATIONS[v.relation](v.value, v.bound), str(v)
            assert v.margin >= 0

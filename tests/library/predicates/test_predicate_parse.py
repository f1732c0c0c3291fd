"""Parsing and canonical printing: round trips, structure, names and clauses."""

from __future__ import annotations

import pytest
from hypothesis import given, settings

from kinetome.library.predicates import (
    BinOp,
    BoolOp,
    Call,
    Compare,
    Index,
    Name,
    Neg,
    Num,
    Power,
    Predicate,
    PredicateError,
    Vector,
    parse_predicate,
)
from predicate_reference import SHAPES, booleans

NAMES = {
    "qpos": (3,),
    "qvel": (3,),
    "fingertip": (3,),
    "fingertip_vel": (3,),
    "target": (3,),
    "tolerance": (),
    "torso_height": (),
    "torso_pitch": (),
    "foot_contact": (2,),
    "jac": (3, 2),
}

# (text as a user writes it, canonical text)
ROUND_TRIP = [
    ("norm(fingertip - target) < 0.02 and norm(fingertip_vel) < 0.05", None),
    ("all(abs(qvel) <= 1.0) and torso_height > 0.8", "all(abs(qvel) <= 1) and torso_height > 0.8"),
    ("qpos[0] >= -0.5 and not any(foot_contact > 0)", None),
    ("norm(fingertip - [0.30, 0.0, 0.45]) < tolerance", "norm(fingertip - [0.3, 0, 0.45]) < tolerance"),
    ("0.2 < torso_height < 1.5", None),
    ("(torso_height > 1) or (torso_pitch < 0.1 and torso_height > 0.5)",
     "torso_height > 1 or torso_pitch < 0.1 and torso_height > 0.5"),
    ("(torso_height > 1 or torso_pitch < 0.1) and torso_height > 0.5", None),
    ("not (torso_height > 1 and torso_pitch < 0)", None),
    ("not not torso_height > 1", None),
    ("torso_height - (torso_pitch - 1) > 0", None),
    ("(torso_height - torso_pitch) - 1 > 0", "torso_height - torso_pitch - 1 > 0"),
    ("torso_height / (torso_pitch * 2) > 0", None),
    ("torso_height * (torso_pitch + 2) > 0", None),
    ("torso_height + (torso_pitch + 2) > 0", None),
    ("-torso_height ** 2 < 0", None),
    ("(-torso_height) ** 2 < 1", None),
    ("(-0.5) ** 2 < torso_height", None),
    ("-0.5 * torso_height < 1", None),
    ("torso_height - -0.5 < 1", None),
    ("- (-torso_height) < 1", "--torso_height < 1"),
    ("+torso_height < 1", "torso_height < 1"),
    ("-(2) < torso_height", "-2 < torso_height"),
    ("(fingertip - target)[2] > 0", None),
    ("jac[1][0] > 0 and jac[-1][-2] < 1", None),
    ("all(jac[0] < 1)", None),
    ("min(qpos) > -1 and max(qpos, 0.5) [0] < 2", "min(qpos) > -1 and max(qpos, 0.5)[0] < 2"),
    ("sqrt(torso_height ** 2 + torso_pitch ** 4) <= 1e-05", None),
    ("torso_height > 1e-7", "torso_height > 1e-07"),
    ("torso_height > 0.30000000000000004", None),
    ("torso_height == 1 or torso_height != 2", None),
    ("any((qpos > 0)[0] and all(qvel < 1))", None),
    ("(qpos > 0)[-1]", None),
    ("norm(jac) < 3 and all(abs(jac) <= 1)", None),
    ("torso_height >\n 0.5", "torso_height > 0.5"),
    ("   torso_height > 0.5", "torso_height > 0.5"),
    ("(torso_height\n > 0.5)", "torso_height > 0.5"),
    ("[1, 2, 3][1] < torso_height", None),
    ("torso_height ** 0 == 1", None),
]


@pytest.mark.parametrize("text, canonical", ROUND_TRIP)
def test_round_trip_table(text: str, canonical: str | None) -> None:
    pred = parse_predicate(text, NAMES)
    expected = canonical if canonical is not None else text
    assert str(pred) == expected
    again = parse_predicate(str(pred), NAMES)
    assert again == pred
    assert hash(again) == hash(pred)
    assert str(again) == str(pred)


def test_parsed_structure() -> None:
    pred = parse_predicate("0.2 < torso_height < 1.5 and -qpos[0] ** 2 > -1", NAMES)
    assert pred.root == BoolOp(
        "and",
        (
            Compare((Num(0.2), Name("torso_height"), Num(1.5)), ("<", "<")),
            Compare((Neg(Power(Index(Name("qpos"), 0), 2)), Num(-1.0)), (">",)),
        ),
    )


def test_negative_literals_fold_and_unary_plus_drops() -> None:
    pred = parse_predicate("torso_height > -(-(+0.5))", NAMES)
    assert pred.root == Compare((Name("torso_height"), Num(0.5)), (">",))


def test_nested_and_flattens() -> None:
    pred = parse_predicate("torso_height > 0 and (torso_pitch > 0 and (qpos[0] > 0 and qpos[1] > 0))", NAMES)
    assert isinstance(pred.root, BoolOp) and len(pred.root.items) == 4
    assert [str(c) for c in pred.clauses()] == [
        "torso_height > 0", "torso_pitch > 0", "qpos[0] > 0", "qpos[1] > 0"
    ]


def test_names_and_shapes() -> None:
    pred = parse_predicate("norm(fingertip - target) < tolerance", NAMES)
    assert pred.names == frozenset({"fingertip", "target", "tolerance"})
    assert pred.shapes == (("fingertip", (3,)), ("target", (3,)), ("tolerance", ()))
    assert pred.shape_of("target") == (3,)
    with pytest.raises(KeyError, match="does not use 'qpos'"):
        pred.shape_of("qpos")
    # extra names in the table do not change equality
    assert pred == parse_predicate("norm(fingertip - target) < tolerance", {**NAMES, "extra": (4,)})
    # the same text over different shapes is a different predicate
    other = parse_predicate("norm(fingertip - target) < tolerance",
                            {"fingertip": (2,), "target": (2,), "tolerance": ()})
    assert other != pred


def test_clauses_of_single_and_disjunction() -> None:
    single = parse_predicate("torso_height > 0.8", NAMES)
    assert single.clauses() == (single,)
    disjunction = parse_predicate("torso_height > 0.8 or qpos[0] < 0", NAMES)
    assert disjunction.clauses() == (disjunction,)
    pred = parse_predicate("norm(fingertip - target) < 0.02 and all(abs(qvel) <= 1.0)", NAMES)
    first, second = pred.clauses()
    assert first.names == frozenset({"fingertip", "target"})
    assert second.names == frozenset({"qvel"})
    assert Predicate.conjunction(list(pred.clauses())) == pred


def test_conjunction_rejects_shape_conflicts() -> None:
    a = parse_predicate("norm(x) < 1", {"x": (2,)})
    b = parse_predicate("norm(x) < 1", {"x": (3,)})
    with pytest.raises(ValueError, match="disagree on the shape of 'x'"):
        Predicate.conjunction([a, b])
    with pytest.raises(ValueError, match="at least one predicate"):
        Predicate.conjunction([])


def test_predicate_built_in_code_is_type_checked() -> None:
    root = Compare((Name("v"), Num(1.0)), ("<",))
    with pytest.raises(PredicateError, match=r"wrap the vector comparison in all\(\.\.\.\)") as info:
        Predicate(root, {"v": (3,)})
    assert info.value.column is None
    ok = Predicate(Call("all", (root,)), {"v": (3,)})
    assert str(ok) == "all(v < 1)"


@pytest.mark.parametrize(
    "build, message",
    [
        (lambda: Num(float("nan")), "finite"),
        (lambda: Num(2e9), "magnitude <= 1e9"),
        (lambda: Num(True), "real number"),
        (lambda: Name("not an id"), "identifier"),
        (lambda: Vector(()), "1..64 items"),
        (lambda: BinOp("%", Num(1), Num(2)), "BinOp.op"),
        (lambda: Power(Name("x"), 5), "0..4"),
        (lambda: Compare((Name("x"),), ()), "n ops and n\\+1 operands"),
        (lambda: Compare((Name("x"), Num(1)), ("is",)), "Compare op"),
        (lambda: BoolOp("xor", (Name("x"), Name("y"))), "BoolOp.op"),
        (lambda: BoolOp("and", (Name("x"),)), "at least 2 items"),
        (lambda: Call("eval", (Name("x"),)), "Call.func"),
        (lambda: Call("norm", (Name("x"), Name("y"))), "exactly 1 argument"),
        (lambda: Index(Name("x"), 1.0), "int"),
        (lambda: Neg("x"), "predicate nodes"),
    ],
)
def test_node_constructors_validate(build, message: str) -> None:
    with pytest.raises((ValueError, TypeError), match=message):
        build()


@settings(max_examples=150, deadline=None, derandomize=True, database=None)
@given(booleans(depth=4))
def test_random_trees_round_trip(root) -> None:
    pred = Predicate(root, SHAPES)
    text = str(pred)
    assert parse_predicate(text, SHAPES) == pred, text

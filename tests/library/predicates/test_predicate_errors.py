"""Every rejection rule of the predicate parser, with its message and column pinned."""

from __future__ import annotations

import pytest

from kinetome.library.errors import KinetomeError
from kinetome.library.predicates import MAX_TEXT, PredicateError, parse_predicate

NAMES = {
    "qpos": (3,),
    "qvel": (3,),
    "fingertip": (3,),
    "target": (3,),
    "torso_height": (),
    "foot_contact": (2,),
    "jac": (3, 2),
}
KNOWN = "known names: fingertip, foot_contact, jac, qpos, qvel, target, torso_height"
FUNCS = "functions: abs, all, any, max, min, norm, sqrt"

# (text, pieces the message must contain, expected 1-based column or None)
REJECTED = [
    # names and functions
    ("norm(fingertp - target) < 0.02",
     ["unknown name 'fingertp' at column 6", "did you mean 'fingertip'?", KNOWN], 6),
    ("torso_heigth > 1", ["unknown name 'torso_heigth'", "did you mean 'torso_height'?"], 1),
    ("zzz > 1", ["unknown name 'zzz' at column 1; " + KNOWN], 1),
    ("nrm(qpos) < 1", ["unknown function 'nrm'", "did you mean 'norm'?", FUNCS], 1),
    ("exp(torso_height) < 1", ["unknown function 'exp'", FUNCS], 1),
    ("__import__('os')", ["unknown function '__import__'"], 1),
    ("norm < 1", ["'norm' is a function, not a value", "call it"], 1),
    ("(qpos)(1) < 1", ["unknown function 'qpos'"], 2),
    ("norm(qpos)(1) < 1", ["only named functions can be called, got 'norm(qpos)'"], 1),
    # attribute access, comprehensions, lambdas and other Python
    ("qpos.sum() > 1", ["attribute access 'qpos.sum' is not allowed"], 1),
    ("torso_height.real > 1", ["attribute access 'torso_height.real' is not allowed"], 1),
    ("(lambda: 1)() > 0", ["only named functions can be called"], 2),
    ("all(lambda x: x)", ["a lambda is not allowed"], 5),
    ("all([x > 0 for x in qpos])", ["a list comprehension is not allowed", "all(abs(qvel) <= 1.0)"], 5),
    ("all(x > 0 for x in qpos)", ["a generator expression is not allowed"], 4),
    ("any({x for x in qpos})", ["a set comprehension is not allowed"], 5),
    ("min(*qpos) > 0", ["starred argument '*qpos' is not allowed in min()", "min(qpos)"], 5),
    ("norm(qpos, ord=2) < 1", ["keyword argument 'ord=' is not allowed in norm()", "by position"], 12),
    ("torso_height if qpos[0] > 0 else 1", ["a conditional expression", "and/or"], 1),
    ("(y := torso_height) > 1", ["an assignment expression (:=) is not allowed"], 2),
    ("(1, 2) < torso_height", ["a tuple is not allowed", "square brackets"], 1),
    ("{1: 2} == torso_height", ["a dict is not allowed"], 1),
    ("'qpos' > 1", ["string literal 'qpos' is not allowed", "without quotes"], 1),
    ("f'{qpos}' > 1", ["an f-string is not allowed"], 1),
    ("b'x' > 1", ["the literal b'x' is not allowed"], 1),
    ("torso_height > True", ["the literal True is not allowed"], 16),
    ("torso_height > None", ["the literal None is not allowed"], 16),
    ("torso_height > 1j", ["complex number 1j is not allowed"], 16),
    ("torso_height > ...", ["the literal ... is not allowed"], 16),
    # operators
    ("torso_height // 2 > 1", ["operator '//' is not allowed"], 1),
    ("torso_height % 2 > 1", ["operator '%' is not allowed"], 1),
    ("qpos @ qvel > 1", ["operator '@' is not allowed"], 1),
    ("(torso_height > 1) & (qpos[0] > 0)", ["bitwise '&' is not allowed", "use 'and'"], 1),
    ("(torso_height > 1) | (qpos[0] > 0)", ["bitwise '|' is not allowed", "use 'or'"], 1),
    ("torso_height ^ 2 > 1", ["bitwise '^' is not allowed", "use '**'"], 1),
    ("torso_height << 1 > 1", ["operator '<<' is not allowed"], 1),
    ("~(torso_height > 1)", ["bitwise '~' is not allowed", "use 'not'"], 1),
    ("torso_height is 1", ["operator 'is' is not allowed"], 1),
    ("torso_height is not 1", ["operator 'is not' is not allowed"], 1),
    ("1 in qpos", ["operator 'in' is not allowed"], 1),
    ("1 not in qpos", ["operator 'not in' is not allowed"], 1),
    # powers and literals
    ("torso_height ** 5 < 1", ["exponent of '**' must be an integer literal in 0..4, got 5"], 17),
    ("torso_height ** 2.0 < 1", ["must be an integer literal in 0..4, got '2.0'"], 17),
    ("torso_height ** -1 < 1", ["got '-1'", "1 / x"], 17),
    ("torso_height ** qpos[0] < 1", ["got 'qpos[0]'"], 17),
    ("torso_height < 1e12", ["number literal 1e12 is too large: magnitude must be <= 1e9"], 16),
    ("torso_height < -2000000000", ["number literal 2000000000 is too large"], 17),
    ("torso_height < 1e999", ["number literal 1e999 is too large"], 16),
    # indexing
    ("qpos[0:2] < 1", ["slice 'qpos[0:2]' is not allowed", "qpos[0]"], 6),
    ("qpos[::2] < 1", ["slice 'qpos[::2]' is not allowed"], 6),
    ("jac[0, 1] < 1", ["multi-axis index 'jac[0, 1]' is not allowed", "x[0][1]"], 5),
    ("qpos[torso_height] < 1", ["an index must be an integer literal, got 'torso_height'"], 6),
    ("qpos[1.0] < 1", ["an index must be an integer literal, got '1.0'"], 6),
    ("qpos[True] < 1", ["an index must be an integer literal, got 'True'"], 6),
    ("qpos[3] < 1", ["index 3 is out of range for a vector of 3 numbers ('qpos')", "-3..2"], 1),
    ("qpos[-4] < 1", ["index -4 is out of range"], 1),
    ("torso_height[0] < 1", ["cannot index a number ('torso_height')", "drop the [...]"], 1),
    # vector literals
    ("[] == qpos", ["an empty vector literal is not allowed"], 1),
    ("all(qpos < [" + ", ".join(["1"] * 65) + "])", ["vector literal has 65 items, more than 64"], 12),
    ("all(jac == [qpos, qvel])", ["a vector literal item must be a scalar, got a vector of 3 numbers ('qpos')"], 13),
    ("all([torso_height > 1, 2] == qpos[:1])", ["slice"], None),
    # shapes and kinds
    ("all(fingertip - foot_contact < 1)", ["cannot subtract shapes (3,) and (2,) ('fingertip - foot_contact')",
                                           "a scalar broadcasts"], 5),
    ("all(qpos < foot_contact)", ["cannot compare shapes (3,) and (2,)"], 5),
    ("all(max(qpos, foot_contact) < 1)", ["cannot take max of shapes (3,) and (2,)"], 5),
    ("all(jac < qpos)", ["cannot compare shapes (3, 2) and (3,)"], 5),
    ("qpos < 1", ["the predicate is a vector of 3 booleans, not one true/false value",
                  "wrap the vector comparison in all(...) or any(...)"], 1),
    ("jac < 1", ["the predicate is a 3x2 array of booleans"], 1),
    ("norm(qpos)", ["the predicate is a number, not a true/false value", "compare it with a bound"], 1),
    ("qpos", ["the predicate is a vector of 3 numbers"], 1),
    ("norm(qpos) + (torso_height > 1) < 3",
     ["the right operand of '+' must be a number, got a boolean ('torso_height > 1')", "take numbers"], 15),
    ("-(torso_height > 1)", ["the operand of unary '-' must be a number, got a boolean"], 3),
    ("(qpos[0] > 0) ** 2 > 0", ["the base of '**' must be a number"], 2),
    ("(torso_height > 1) < 2", ["an operand of '<' must be a number, got a boolean"], 2),
    ("norm(qpos > 0) < 1", ["an argument of norm() must be a number, got a vector of 3 booleans"], 6),
    ("qpos < 1 and torso_height > 0", ["an operand of 'and' must be one true/false value, got a vector of 3 booleans",
                                       "all(...) or any(...)"], 1),
    ("torso_height and qpos[0] > 0", ["an operand of 'and' must be one true/false value, got a number",
                                      "compare it with a bound"], 1),
    ("torso_height > 0 or qpos", ["an operand of 'or' must be one true/false value, got a vector of 3 numbers"], 21),
    ("not qpos > 0", ["the operand of 'not' must be one true/false value, got a vector of 3 booleans"], 5),
    ("not torso_height", ["the operand of 'not' must be one true/false value, got a number"], 5),
    ("all(qpos)", ["all(...) takes a comparison, got a vector of 3 numbers ('qpos')", "all(abs(qvel) <= 1.0)"], 1),
    ("any(torso_height)", ["any(...) takes a comparison, got a number"], 1),
    # arity
    ("norm() < 1", ["norm() takes exactly 1 argument, got 0"], 1),
    ("norm(qpos, qvel) < 1", ["norm() takes exactly 1 argument, got 2"], 1),
    ("all(qpos > 0, qvel > 0)", ["all() takes exactly 1 argument, got 2"], 1),
    ("min() < 1", ["min() takes at least 1 argument, got 0"], 1),
    # size limits
    ("-" * 40 + "torso_height < 1", ["nests deeper than 32 levels", "split it"], None),
    ("norm(" * 40 + "qpos" + ")" * 40 + " < 1", ["nests deeper than 32 levels"], None),
    # syntax
    ("torso_height <", ["invalid syntax at column 15"], 15),
    ("torso_height > 1 1", ["invalid syntax"], None),
    ("torso_height = 1", ["invalid syntax"], None),
    ("", ["is empty"], None),
    ("   \n ", ["is empty"], None),
    ("import os", ["invalid syntax"], None),
    ("torso_height > 1 # and\n qpos[0] > 0", ["comments ('#') are not allowed"], 18),
    ("'#' > 1", ["comments ('#') are not allowed"], 2),
]


@pytest.mark.parametrize("text, pieces, column", REJECTED)
def test_rejected(text: str, pieces: list[str], column: int | None) -> None:
    with pytest.raises(PredicateError) as info:
        parse_predicate(text, NAMES)
    err = info.value
    message = str(err)
    for piece in pieces:
        assert piece in message, f"{piece!r} not in {message!r}"
    if column is not None:
        assert err.column == column, message
    assert err.text == text
    assert message.startswith("predicate: ")
    if text.strip():
        assert text.replace("\n", " ")[:60] in message  # the offending text is quoted
    assert isinstance(err, ValueError) and isinstance(err, KinetomeError)


def test_paren_depth_is_not_expression_depth() -> None:
    # redundant parentheses add no nesting: accepted
    pred = parse_predicate("(" * 40 + "torso_height" + ")" * 40 + " < 1", NAMES)
    assert str(pred) == "torso_height < 1"


def test_text_length_limit() -> None:
    text = "torso_height < 1 and " * 100 + "torso_height < 1"
    assert len(text) > MAX_TEXT
    with pytest.raises(PredicateError, match=f"is {len(text)} characters long, more than {MAX_TEXT}"):
        parse_predicate(text, NAMES)
    # the long text is quoted as an excerpt, not whole
    with pytest.raises(PredicateError) as info:
        parse_predicate(text, NAMES)
    assert "..." in str(info.value) and len(str(info.value)) < 400


def test_what_names_the_field_and_multiline_position() -> None:
    text = "torso_height > 0.5 and\n  norm(fingertp) < 1"
    with pytest.raises(PredicateError) as info:
        parse_predicate(text, NAMES, what="stops_when")
    err = info.value
    assert str(err).startswith("stops_when: unknown name 'fingertp' at line 2, column 8;")
    assert (err.line, err.column) == (2, 8)
    assert err.pointer() == "  norm(fingertp) < 1\n       ^"


def test_non_ascii_column_counts_characters() -> None:
    names = {"höhe": (), "qpos": (3,)}
    with pytest.raises(PredicateError) as info:
        parse_predicate("höhe > 1 and qpso[0] > 0", names)
    assert info.value.column == 14
    assert "did you mean 'qpos'?" in str(info.value)


def test_text_must_be_a_string() -> None:
    with pytest.raises(PredicateError, match="must be text, got int"):
        parse_predicate(3, NAMES)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "names, message",
    [
        ({"not id": ()}, "identifiers"),
        ({"x": (0,)}, "positive ints"),
        ({"x": 3}, "positive ints"),
        ({"x": (2.0,)}, "positive ints"),
    ],
)
def test_bad_name_table(names: dict, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        parse_predicate("x > 0", names)

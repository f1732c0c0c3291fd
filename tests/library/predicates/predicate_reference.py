"""Test helpers: a slow per-row reference evaluator in plain Python floats, and tree strategies."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from hypothesis import strategies as st

from kinetome.library.predicates import (
    BinOp,
    BoolOp,
    Call,
    Compare,
    Index,
    Name,
    Neg,
    Node,
    Not,
    Num,
    Power,
    Vector,
)

__all__ = ["reference_row", "reference_batch", "numbers", "booleans", "SHAPES"]

# Names used by the generated trees: scalars, vectors and one 2-D array.
SHAPES: dict[str, tuple[int, ...]] = {
    "a": (),
    "b": (),
    "gain": (),
    "v": (3,),
    "w": (3,),
    "m": (2, 3),
}


# ---------------------------------------------------------------------------------
# Reference evaluation: one row at a time, Python floats and the math module only.
# Rules written out plainly: x / 0 -> nan, sqrt(x < 0) -> nan, nan propagates,
# every comparison with nan is false (including !=).
# ---------------------------------------------------------------------------------
def _map(f, *xs: Any) -> Any:
    """Apply f elementwise over nested lists, broadcasting plain scalars."""
    lists = [x for x in xs if isinstance(x, list)]
    if not lists:
        return f(*xs)
    n = len(lists[0])
    return [_map(f, *[x[i] if isinstance(x, list) else x for x in xs]) for i in range(n)]


def _flatten(x: Any) -> list:
    if isinstance(x, list):
        out: list = []
        for item in x:
            out.extend(_flatten(item))
        return out
    return [x]


def _div(a: float, b: float) -> float:
    return math.nan if b == 0 else a / b


def _sqrt(x: float) -> float:
    if math.isnan(x) or x < 0:
        return math.nan
    return math.sqrt(x)


def _cmp(op: str, a: float, b: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return False
    return {
        "<": a < b,
        "<=": a <= b,
        ">": a > b,
        ">=": a >= b,
        "==": a == b,
        "!=": a != b,
    }[op]


def _min2(a: float, b: float) -> float:
    if math.isnan(a) or math.isnan(b):
        return math.nan
    return a if a <= b else b


def _max2(a: float, b: float) -> float:
    if math.isnan(a) or math.isnan(b):
        return math.nan
    return a if a >= b else b


def reference_row(node: Node, row: dict[str, Any]) -> Any:
    """Value of ``node`` for one state given as plain floats / nested lists."""
    r = lambda n: reference_row(n, row)  # noqa: E731
    if isinstance(node, Num):
        return node.value
    if isinstance(node, Name):
        return row[node.id]
    if isinstance(node, Vector):
        return [r(x) for x in node.items]
    if isinstance(node, Neg):
        return _map(lambda x: -x, r(node.operand))
    if isinstance(node, BinOp):
        f = {
            "+": lambda x, y: x + y,
            "-": lambda x, y: x - y,
            "*": lambda x, y: x * y,
            "/": _div,
        }[node.op]
        return _map(f, r(node.left), r(node.right))
    if isinstance(node, Power):
        def power(x: float) -> float:
            if node.exponent == 0:
                return 1.0
            out = x
            for _ in range(node.exponent - 1):
                out = out * x
            return out

        return _map(power, r(node.base))
    if isinstance(node, Compare):
        values = [r(x) for x in node.operands]
        links = [
            _map(lambda x, y, op=op: _cmp(op, x, y), values[i], values[i + 1])
            for i, op in enumerate(node.ops)
        ]
        out = links[0]
        for link in links[1:]:
            out = _map(lambda x, y: x and y, out, link)
        return out
    if isinstance(node, BoolOp):
        items = [r(x) for x in node.items]
        return all(items) if node.op == "and" else any(items)
    if isinstance(node, Not):
        return not r(node.operand)
    if isinstance(node, Call):
        args = [r(x) for x in node.args]
        f = node.func
        if f == "all":
            return all(_flatten(args[0]))
        if f == "any":
            return any(_flatten(args[0]))
        if f == "abs":
            return _map(abs, args[0])
        if f == "sqrt":
            return _map(_sqrt, args[0])
        if f == "norm":
            flat = _flatten(args[0])
            total = flat[0] * flat[0]
            for x in flat[1:]:
                total = total + x * x
            return _sqrt(total)
        pick = _min2 if f == "min" else _max2
        if len(args) == 1:
            flat = _flatten(args[0])
            out = flat[0]
            for x in flat[1:]:
                out = pick(out, x)
            return out
        out = args[0]
        for other in args[1:]:
            out = _map(pick, out, other)
        return out
    if isinstance(node, Index):
        return r(node.target)[node.index]
    raise TypeError(f"no reference rule for {type(node).__name__}")


def reference_batch(node: Node, values: dict[str, np.ndarray], batch: int, shapes: dict) -> list:
    """``reference_row`` for each row, parameters without a batch axis shared by all rows."""
    out = []
    for i in range(batch):
        row = {}
        for name, shape in shapes.items():
            if name not in values:
                continue
            arr = np.asarray(values[name], dtype=np.float64)
            row[name] = (arr if arr.shape == shape else arr[i]).tolist()
        out.append(reference_row(node, row))
    return out


# ---------------------------------------------------------------------------------
# Hypothesis strategies for well-typed trees over SHAPES.
# ---------------------------------------------------------------------------------
_literals = st.one_of(
    st.integers(-5, 5).map(float),
    st.sampled_from([0.5, -0.25, 0.1, 1e-5, 2.5e-3, 1e9, -1e9, 0.30000000000000004]),
    st.floats(-1e3, 1e3, allow_nan=False, allow_infinity=False),
)


def _negate(node: Node) -> Node:
    return Num(-node.value) if isinstance(node, Num) else Neg(node)


def _names_of(shape: tuple[int, ...]) -> list[str]:
    return [n for n, s in SHAPES.items() if s == shape]


@st.composite
def numbers(draw, shape: tuple[int, ...] = (), depth: int = 3) -> Node:
    """A number-valued tree of the given shape."""
    leaves = []
    if shape == ():
        leaves.append(_literals.map(Num))
        leaves.append(st.sampled_from(_names_of(())).map(Name))
        leaves.append(st.builds(Index, st.just(Name("v")), st.integers(-3, 2)))
    else:
        if _names_of(shape):
            leaves.append(st.sampled_from(_names_of(shape)).map(Name))
        if shape == (3,):
            leaves.append(st.builds(Index, st.just(Name("m")), st.integers(-2, 1)))
    if len(shape) == 1 and shape[0] <= 4 and depth > 0:
        leaves.append(
            st.lists(numbers((), depth - 1), min_size=shape[0], max_size=shape[0]).map(
                lambda xs: Vector(tuple(xs))
            )
        )
    if not leaves:
        raise ValueError(f"no leaf for shape {shape}")
    if depth <= 0:
        return draw(st.one_of(leaves))
    sub = depth - 1
    choice = draw(st.integers(0, 8))
    if choice == 0:
        return draw(st.one_of(leaves))
    if choice == 1:
        return _negate(draw(numbers(shape, sub)))
    if choice == 2:
        op = draw(st.sampled_from(["+", "-", "*", "/"]))
        left_shape, right_shape = draw(
            st.sampled_from([(shape, shape), (shape, ()), ((), shape)])
        )
        return BinOp(op, draw(numbers(left_shape, sub)), draw(numbers(right_shape, sub)))
    if choice == 3:
        return Power(draw(numbers(shape, sub)), draw(st.integers(0, 4)))
    if choice == 4:
        return Call(draw(st.sampled_from(["abs", "sqrt"])), (draw(numbers(shape, sub)),))
    if choice == 5:
        n = draw(st.integers(2, 3))
        shapes = [shape] + [draw(st.sampled_from([shape, ()])) for _ in range(n - 1)]
        args = [draw(numbers(s, sub)) for s in draw(st.permutations(shapes))]
        return Call(draw(st.sampled_from(["min", "max"])), tuple(args))
    if choice == 6 and shape == ():
        inner = draw(st.sampled_from([(3,), (2, 3), ()]))
        return Call(draw(st.sampled_from(["norm", "min", "max"])), (draw(numbers(inner, sub)),))
    if choice == 7 and shape in ((), (3,)):
        outer = (3,) if shape == () else (2, 3)
        n = outer[0]
        return Index(draw(numbers(outer, sub)), draw(st.integers(-n, n - 1)))
    return draw(st.one_of(leaves))


@st.composite
def booleans(draw, depth: int = 3) -> Node:
    """A scalar boolean tree."""
    sub = max(depth - 1, 0)
    choice = draw(st.integers(0, 5 if depth > 0 else 1))
    if choice <= 1:
        shape = draw(st.sampled_from([(), (), (3,)]))
        n_ops = draw(st.integers(1, 2))
        operands = tuple(draw(numbers(shape, sub)) for _ in range(n_ops + 1))
        ops = tuple(draw(st.sampled_from(["<", "<=", ">", ">=", "==", "!="])) for _ in range(n_ops))
        cmp = Compare(operands, ops)
        if shape == ():
            return cmp
        pick = draw(st.integers(0, 2))
        if pick == 2:
            return Index(cmp, draw(st.integers(-3, 2)))
        return Call("all" if pick == 0 else "any", (cmp,))
    if choice in (2, 3):
        op = draw(st.sampled_from(["and", "or"]))
        items = tuple(draw(booleans(sub)) for _ in range(draw(st.integers(2, 3))))
        return BoolOp(op, items)
    if choice == 4:
        return Not(draw(booleans(sub)))
    return Call(draw(st.sampled_from(["all", "any"])), (draw(booleans(sub)),))

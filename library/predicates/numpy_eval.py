"""Batched numpy back-end: every node becomes an array with a leading batch axis.

Semantics shared with the SMT back-end: division by zero and the square root
of a negative number give NaN, NaN propagates through arithmetic, norm, abs,
min and max, and every comparison involving NaN is false (``!=`` included).
"""

from __future__ import annotations

from functools import reduce
from typing import Mapping

import numpy as np

from kinetome.library.predicates.nodes import (
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
    Visitor,
)

__all__ = ["prepare_values", "evaluate_node", "NumpyEvaluator"]


def prepare_values(
    values: Mapping[str, np.ndarray],
    shapes: Mapping[str, tuple[int, ...]],
    *,
    batch: int | None = None,
) -> tuple[dict[str, np.ndarray], int]:
    """Arrays of shape (B or 1, *shape) for every name in ``shapes``, and the batch size B.

    A value of shape ``shape`` has no batch axis and is shared by all rows (a
    skill parameter); a value of shape ``(B, *shape)`` gives one row per state.
    All batched values must agree on B (and with ``batch`` when given); with
    none batched, B is ``batch``, or 1.
    """
    if batch is not None and (isinstance(batch, bool) or not isinstance(batch, int) or batch < 1):
        raise ValueError(f"batch must be a positive integer, got {batch!r}")
    arrays: dict[str, np.ndarray] = {}
    batch_from = "the batch argument"  # where the batch size came from, for messages
    for name, shape in shapes.items():
        if name not in values:
            raise ValueError(
                f"values must include {name!r} (shape {shape}) used by the predicate, "
                f"got names {sorted(values)}; add an array of shape (B, *{shape}) or {shape}"
            )
        arr = np.asarray(values[name], dtype=np.float64)
        if arr.shape == tuple(shape):
            arrays[name] = arr.reshape((1, *shape))
            continue
        if arr.ndim != len(shape) + 1 or arr.shape[1:] != tuple(shape):
            raise ValueError(
                f"value of {name!r} must have shape (B, *{shape}) or {shape}, got {arr.shape}"
            )
        if batch is None:
            batch, batch_from = arr.shape[0], repr(name)
        elif arr.shape[0] != batch:
            raise ValueError(
                f"batch sizes must agree, got {batch} rows for {batch_from} "
                f"and {arr.shape[0]} for {name!r}"
            )
        arrays[name] = arr
    return arrays, 1 if batch is None else batch


def _lift(a: np.ndarray, ndim: int) -> np.ndarray:
    """Append axes so a scalar-per-row array broadcasts against a vector-per-row one."""
    return a.reshape(a.shape + (1,) * (ndim - a.ndim)) if a.ndim < ndim else a


def _lift_all(arrays: list[np.ndarray]) -> list[np.ndarray]:
    ndim = max(a.ndim for a in arrays)
    return [_lift(a, ndim) for a in arrays]


def _flat(a: np.ndarray) -> np.ndarray:
    return a.reshape(a.shape[0], -1)


def _compare(op: str, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    if op == "<":
        return a < b
    if op == "<=":
        return a <= b
    if op == ">":
        return a > b
    if op == ">=":
        return a >= b
    if op == "==":
        return a == b
    return (a < b) | (a > b)  # '!=' that is false on NaN


class NumpyEvaluator(Visitor[np.ndarray]):
    """Evaluates nodes over prepared arrays (see ``prepare_values``)."""

    def __init__(self, arrays: Mapping[str, np.ndarray]):
        self.arrays = arrays

    def visit_num(self, node: Num) -> np.ndarray:
        return np.array([node.value], dtype=np.float64)

    def visit_name(self, node: Name) -> np.ndarray:
        return self.arrays[node.id]

    def visit_vector(self, node: Vector) -> np.ndarray:
        items = np.broadcast_arrays(*(self.visit(x) for x in node.items))
        return np.stack(items, axis=1)

    def visit_neg(self, node: Neg) -> np.ndarray:
        return -self.visit(node.operand)

    def visit_binop(self, node: BinOp) -> np.ndarray:
        a, b = _lift_all([self.visit(node.left), self.visit(node.right)])
        if node.op == "+":
            return a + b
        if node.op == "-":
            return a - b
        if node.op == "*":
            return a * b
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(b == 0, np.nan, a / np.where(b == 0, 1.0, b))

    def visit_power(self, node: Power) -> np.ndarray:
        base = self.visit(node.base)
        if node.exponent == 0:
            return np.ones_like(base)
        result = base
        for _ in range(node.exponent - 1):
            result = result * base  # repeated product, as the SMT back-end does
        return result

    def visit_compare(self, node: Compare) -> np.ndarray:
        operands = _lift_all([self.visit(x) for x in node.operands])
        links = [_compare(op, operands[i], operands[i + 1]) for i, op in enumerate(node.ops)]
        return reduce(np.logical_and, links)

    def visit_boolop(self, node: BoolOp) -> np.ndarray:
        combine = np.logical_and if node.op == "and" else np.logical_or
        return reduce(combine, (self.visit(x) for x in node.items))

    def visit_not(self, node: Not) -> np.ndarray:
        return np.logical_not(self.visit(node.operand))

    def visit_call(self, node: Call) -> np.ndarray:
        args = [self.visit(x) for x in node.args]
        f = node.func
        if f in ("all", "any"):
            x = args[0]
            if x.ndim == 1:
                return x
            return np.all(_flat(x), axis=1) if f == "all" else np.any(_flat(x), axis=1)
        if f == "abs":
            return np.abs(args[0])
        if f == "sqrt":
            with np.errstate(invalid="ignore"):
                return np.sqrt(args[0])
        if f == "norm":
            x = args[0]
            if x.ndim == 1:
                return np.abs(x)
            flat = _flat(x)
            total = flat[:, 0] * flat[:, 0]
            for j in range(1, flat.shape[1]):  # fixed left-to-right order over components
                total = total + flat[:, j] * flat[:, j]
            return np.sqrt(total)
        # min / max
        if len(args) == 1:
            x = args[0]
            if x.ndim == 1:
                return x
            return np.min(_flat(x), axis=1) if f == "min" else np.max(_flat(x), axis=1)
        combine = np.minimum if f == "min" else np.maximum
        return reduce(combine, _lift_all(args))

    def visit_index(self, node: Index) -> np.ndarray:
        return self.visit(node.target)[:, node.index]


def evaluate_node(node: Node, arrays: Mapping[str, np.ndarray]) -> np.ndarray:
    """Value of any sub-expression over prepared arrays: shape (B or 1, *node shape).

    Overflow to inf and inf - inf = NaN are ordinary float results here, not warnings.
    """
    with np.errstate(all="ignore"):
        return NumpyEvaluator(arrays).visit(node)

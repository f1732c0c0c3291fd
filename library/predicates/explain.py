"""Why a state fails a predicate: per failing top-level clause, the quantity, its bound and the margin."""

from __future__ import annotations

import math
from dataclasses import dataclass
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
    walk,
)
from kinetome.library.predicates.numpy_eval import evaluate_node, prepare_values
from kinetome.library.predicates.predicate import Predicate
from kinetome.library.predicates.printer import to_text

__all__ = ["Violation", "explain"]

_NEGATED = {"<": ">=", "<=": ">", ">": "<=", ">=": "<", "==": "!=", "!=": "=="}
_MIRRORED = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "==": "==", "!=": "!="}


def _fmt(x: float) -> str:
    if math.isnan(x):
        return "nan"
    return f"{x:.4g}"


@dataclass(frozen=True)
class Violation:
    """One failing clause: ``quantity relation bound`` should hold but does not.

    ``margin`` is how far ``value`` is on the wrong side of ``bound`` (``>= 0``;
    NaN when the value is not a number). ``bound_text`` is the bound's
    expression when it is not a plain number (e.g. ``tolerance``), else ``""``.
    """

    clause_text: str
    quantity_text: str
    value: float
    bound: float
    relation: str
    margin: float
    bound_text: str = ""

    def __str__(self) -> str:
        if self.relation == "true":
            return f"{self.quantity_text} is false"
        bound = f"{self.bound_text} = {_fmt(self.bound)}" if self.bound_text else _fmt(self.bound)
        head = f"{self.quantity_text} = {_fmt(self.value)}, needs {self.relation} {bound}"
        if math.isnan(self.value) or math.isnan(self.bound):
            return f"{head} (not a number)"
        if self.relation in ("<", "<="):
            return f"{head} (over by {_fmt(self.margin)})"
        if self.relation in (">", ">="):
            return f"{head} (under by {_fmt(self.margin)})"
        if self.relation == "==":
            return f"{head} (off by {_fmt(self.margin)})"
        return f"{head} (equal)"


def _severity(v: Violation) -> float:
    return math.inf if math.isnan(v.margin) else v.margin


def _negate(node: Node) -> Node:
    """A node true exactly where ``node`` is false (for failing states, where no NaN decides)."""
    if isinstance(node, Not):
        return node.operand
    if isinstance(node, Compare):
        flipped = [
            Compare((a, b), (_NEGATED[op],)) for a, op, b in node.links()
        ]
        return flipped[0] if len(flipped) == 1 else BoolOp("or", tuple(flipped))
    if isinstance(node, BoolOp):
        return BoolOp("or" if node.op == "and" else "and", tuple(_negate(x) for x in node.items))
    if isinstance(node, Call) and node.func in ("all", "any"):
        return Call("any" if node.func == "all" else "all", (_negate(node.args[0]),))
    if isinstance(node, Index):
        return Index(_negate(node.target), node.index)
    return Not(node)


class _Explainer:
    def __init__(self, arrays: Mapping[str, np.ndarray], clause_text: str):
        self.arrays = arrays
        self.clause_text = clause_text

    def value(self, node: Node) -> np.ndarray:
        """Value of ``node`` on the one row, without the batch axis."""
        return evaluate_node(node, self.arrays)[0]

    def shape(self, node: Node) -> tuple[int, ...]:
        return self.value(node).shape

    def element(self, node: Node, i: int) -> Node:
        """A node for element ``i`` of a vector node, indexing as deep as possible."""
        n = self.shape(node)[0]
        i = i % n
        if isinstance(node, Name):
            return Index(node, i)
        if isinstance(node, Vector):
            return node.items[i]
        if isinstance(node, Index):
            pushed = self.element(node.target, node.index)
            return Index(node, i) if pushed == node else self.element(pushed, i)
        if isinstance(node, Neg):
            inner = self.element(node.operand, i)
            return Num(-inner.value) if isinstance(inner, Num) else Neg(inner)
        if isinstance(node, Power):
            return Power(self.element(node.base, i), node.exponent)
        if isinstance(node, BinOp):
            return BinOp(node.op, self._maybe(node.left, i), self._maybe(node.right, i))
        if isinstance(node, Compare):
            return Compare(tuple(self._maybe(x, i) for x in node.operands), node.ops)
        if isinstance(node, BoolOp):
            return BoolOp(node.op, tuple(self._maybe(x, i) for x in node.items))
        if isinstance(node, Call) and (node.func in ("abs", "sqrt") or len(node.args) > 1):
            return Call(node.func, tuple(self._maybe(x, i) for x in node.args))
        return Index(node, i)

    def _maybe(self, node: Node, i: int) -> Node:
        return self.element(node, i) if self.shape(node) != () else node

    def elements(self, node: Node) -> list[Node]:
        """Scalar nodes for every element of ``node``, in row-major order."""
        shape = self.shape(node)
        if shape == ():
            return [node]
        out: list[Node] = []
        for i in range(shape[0]):
            out.extend(self.elements(self.element(node, i)))
        return out

    def why_false(self, node: Node) -> Violation:
        """The most telling reason a scalar boolean ``node`` is false on the row."""
        if isinstance(node, Compare):
            found = [self._link(a, op, b) for a, op, b in node.links()]
            failing = [v for v in found if v is not None]
            return max(failing, key=_severity) if failing else self._opaque(node)
        if isinstance(node, Not):
            return self.why_false(_negate(node.operand))
        if isinstance(node, BoolOp):
            reasons = [self.why_false(x) for x in node.items if not bool(self.value(x))]
            if not reasons:
                return self._opaque(node)
            # and: the worst failing part; or: the part closest to holding
            return max(reasons, key=_severity) if node.op == "and" else min(reasons, key=_severity)
        if isinstance(node, Call) and node.func in ("all", "any"):
            parts = self.elements(node.args[0])
            reasons = [self.why_false(x) for x in parts if not bool(self.value(x))]
            if not reasons:
                return self._opaque(node)
            return max(reasons, key=_severity) if node.func == "all" else min(reasons, key=_severity)
        if isinstance(node, Index):
            return self.why_false(self.element(node.target, node.index))
        return self._opaque(node)

    def _link(self, a: Node, op: str, b: Node) -> Violation | None:
        va, vb = float(self.value(a)), float(self.value(b))
        if bool(self.value(Compare((a, b), (op,)))):
            return None
        constant_left = not any(isinstance(n, Name) for n in walk(a))
        constant_right = not any(isinstance(n, Name) for n in walk(b))
        if constant_left and not constant_right:
            a, b, va, vb, op = b, a, vb, va, _MIRRORED[op]
        if op in ("<", "<="):
            margin = va - vb
        elif op in (">", ">="):
            margin = vb - va
        elif op == "==":
            margin = abs(va - vb)
        else:
            margin = 0.0
        return Violation(
            clause_text=self.clause_text,
            quantity_text=to_text(a),
            value=va,
            bound=vb,
            relation=op,
            margin=margin,
            bound_text="" if isinstance(b, Num) else to_text(b),
        )

    def _opaque(self, node: Node) -> Violation:
        nan = float("nan")
        return Violation(self.clause_text, to_text(node), nan, nan, "true", nan)


def explain(
    pred: Predicate, values: Mapping[str, np.ndarray], row: int, *, batch: int | None = None
) -> list[Violation]:
    """Violations of the failing top-level clauses of ``pred`` on batch row ``row``.

    Empty when the predicate holds there. A vector comparison inside all(...)
    is explained by its worst element; inside any(...) by the element closest
    to holding; an ``or`` by its part closest to holding. ``values`` and
    ``batch`` are as for ``Predicate.evaluate``.
    """
    arrays, batch = prepare_values(values, dict(pred.shapes), batch=batch)
    if isinstance(row, bool) or not isinstance(row, (int, np.integer)) or not -batch <= row < batch:
        raise IndexError(f"row must be an integer in {-batch}..{batch - 1}, got {row!r}")
    row = int(row) % batch
    one = {name: (a if a.shape[0] == 1 else a[row : row + 1]) for name, a in arrays.items()}
    out: list[Violation] = []
    for clause in pred.clauses():
        explainer = _Explainer(one, str(clause))
        if not bool(explainer.value(clause.root)):
            out.append(explainer.why_false(clause.root))
    return out


"""Shape and kind checking of a predicate tree against the shapes of its names."""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import Literal, Mapping

from kinetome.library.predicates.errors import PredicateError
from kinetome.library.predicates.nodes import (
    FUNCTIONS,
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
from kinetome.library.predicates.printer import to_text

__all__ = ["ExprType", "Span", "TypeChecker", "check_shapes", "describe_type", "suggest"]

Kind = Literal["number", "boolean"]


@dataclass(frozen=True)
class ExprType:
    """What an expression yields: numbers or booleans, of a shape (``()`` for a scalar)."""

    kind: Kind
    shape: tuple[int, ...]

    @property
    def is_scalar(self) -> bool:
        return self.shape == ()


@dataclass(frozen=True)
class Span:
    """Where a node came from in the text (1-based line and column) and its source."""

    line: int
    column: int
    source: str


def describe_type(t: ExprType) -> str:
    """Plain words for a type: 'a number', 'a vector of 3 booleans', ..."""
    noun = "number" if t.kind == "number" else "boolean"
    if t.shape == ():
        return f"a {noun}"
    if len(t.shape) == 1:
        return f"a vector of {t.shape[0]} {noun}s"
    return f"a {'x'.join(map(str, t.shape))} array of {noun}s"


def suggest(word: str, known: list[str]) -> str:
    """' did you mean 'x'?' for a close match, else ''."""
    close = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
    return f"did you mean {close[0]!r}? " if close else ""


def check_shapes(shapes: Mapping[str, tuple[int, ...]]) -> dict[str, tuple[int, ...]]:
    """Validate a name -> shape table; returns it with shapes as int tuples."""
    checked: dict[str, tuple[int, ...]] = {}
    for name, shape in shapes.items():
        if not isinstance(name, str) or not name.isidentifier():
            raise ValueError(f"predicate names must be identifiers, got {name!r}")
        try:
            dims = tuple(shape)
        except TypeError:
            raise ValueError(
                f"shape of {name!r} must be a tuple of positive ints (() for a scalar), got {shape!r}"
            ) from None
        if any(isinstance(d, bool) or not isinstance(d, int) or d < 1 for d in dims):
            raise ValueError(
                f"shape of {name!r} must be a tuple of positive ints (() for a scalar), got {shape!r}"
            )
        checked[name] = dims
    return checked


class TypeChecker(Visitor[ExprType]):
    """Infers the ``ExprType`` of every node; raises ``PredicateError`` on misuse.

    ``spans`` maps ``id(node)`` to its ``Span`` so errors point at the text;
    trees built in code have no spans and get errors without a column.
    """

    def __init__(
        self,
        shapes: Mapping[str, tuple[int, ...]],
        *,
        spans: Mapping[int, Span] | None = None,
        text: str = "",
        what: str = "predicate",
    ):
        self.shapes = dict(shapes)
        self.spans = dict(spans or {})
        self.text = text
        self.what = what
        self.types: dict[int, ExprType] = {}
        self._keep: list[Node] = []  # keeps visited nodes alive so their ids stay unique

    # -- entry points -------------------------------------------------------------
    def type_of(self, node: Node) -> ExprType:
        known = self.types.get(id(node))
        if known is None:
            known = self.visit(node)
            self.types[id(node)] = known
            self._keep.append(node)
        return known

    def check_predicate(self, root: Node) -> ExprType:
        """Type of the whole predicate, which must be one boolean."""
        t = self.type_of(root)
        if t.kind == "boolean" and t.is_scalar:
            return t
        if t.kind == "boolean":
            raise self.error(
                root,
                f"the predicate is {describe_type(t)}, not one true/false value",
                "wrap the vector comparison in all(...) or any(...)",
            )
        raise self.error(
            root,
            f"the predicate is {describe_type(t)}, not a true/false value",
            "compare it with a bound, e.g. '... < 0.1'",
        )

    # -- helpers ----------------------------------------------------------------
    def error(self, node: Node, reason: str, fix: str = "") -> PredicateError:
        span = self.spans.get(id(node))
        return PredicateError(
            reason,
            fix=fix,
            text=self.text,
            line=span.line if span else None,
            column=span.column if span else None,
            what=self.what,
        )

    def _source(self, node: Node) -> str:
        span = self.spans.get(id(node))
        return span.source if span is not None else to_text(node)

    def _number(self, node: Node, role: str) -> ExprType:
        t = self.type_of(node)
        if t.kind != "number":
            raise self.error(
                node,
                f"{role} must be a number, got {describe_type(t)} ({self._source(node)!r})",
                "arithmetic and comparisons take numbers; combine comparisons with and/or/not",
            )
        return t

    def _scalar_boolean(self, node: Node, role: str) -> ExprType:
        t = self.type_of(node)
        if t.kind == "boolean" and t.is_scalar:
            return t
        if t.kind == "boolean":
            fix = "wrap the vector comparison in all(...) or any(...)"
        else:
            fix = "compare it with a bound, e.g. '... < 0.1'"
        raise self.error(
            node,
            f"{role} must be one true/false value, got {describe_type(t)} ({self._source(node)!r})",
            fix,
        )

    def _broadcast(self, node: Node, what: str, parts: list[Node], types: list[ExprType]) -> tuple[int, ...]:
        shape: tuple[int, ...] = ()
        for part, t in zip(parts, types):
            if t.shape == ():
                continue
            if shape == ():
                shape = t.shape
            elif t.shape != shape:
                listed = " and ".join(str(tt.shape) for tt in types)
                raise self.error(
                    node,
                    f"cannot {what} shapes {listed} ({self._source(node)!r})",
                    "vectors must have equal shapes; a scalar broadcasts against any shape",
                )
        return shape

    # -- nodes ------------------------------------------------------------------
    def visit_num(self, node: Num) -> ExprType:
        return ExprType("number", ())

    def visit_name(self, node: Name) -> ExprType:
        shape = self.shapes.get(node.id)
        if shape is None:
            known = sorted(self.shapes)
            if node.id in FUNCTIONS:
                raise self.error(
                    node,
                    f"{node.id!r} is a function, not a value",
                    f"call it, e.g. {node.id}(...)",
                )
            raise self.error(
                node,
                f"unknown name {node.id!r}",
                f"{suggest(node.id, known)}known names: {', '.join(known) or '(none)'}",
            )
        return ExprType("number", shape)

    def visit_vector(self, node: Vector) -> ExprType:
        for item in node.items:
            t = self._number(item, "a vector literal item")
            if not t.is_scalar:
                raise self.error(
                    item,
                    f"a vector literal item must be a scalar, got {describe_type(t)} "
                    f"({self._source(item)!r})",
                    "vector literals are flat lists of numbers such as [0.3, 0.0, 0.45]",
                )
        return ExprType("number", (len(node.items),))

    def visit_neg(self, node: Neg) -> ExprType:
        return self._number(node.operand, "the operand of unary '-'")

    def visit_binop(self, node: BinOp) -> ExprType:
        verbs = {"+": "add", "-": "subtract", "*": "multiply", "/": "divide"}
        types = [
            self._number(node.left, f"the left operand of '{node.op}'"),
            self._number(node.right, f"the right operand of '{node.op}'"),
        ]
        return ExprType("number", self._broadcast(node, verbs[node.op], [node.left, node.right], types))

    def visit_power(self, node: Power) -> ExprType:
        return self._number(node.base, "the base of '**'")

    def visit_compare(self, node: Compare) -> ExprType:
        types = [self._number(x, f"an operand of '{node.ops[0]}'") for x in node.operands]
        return ExprType("boolean", self._broadcast(node, "compare", list(node.operands), types))

    def visit_boolop(self, node: BoolOp) -> ExprType:
        for item in node.items:
            self._scalar_boolean(item, f"an operand of '{node.op}'")
        return ExprType("boolean", ())

    def visit_not(self, node: Not) -> ExprType:
        self._scalar_boolean(node.operand, "the operand of 'not'")
        return ExprType("boolean", ())

    def visit_call(self, node: Call) -> ExprType:
        f = node.func
        if f in ("all", "any"):
            t = self.type_of(node.args[0])
            if t.kind != "boolean":
                raise self.error(
                    node,
                    f"{f}(...) takes a comparison, got {describe_type(t)} ({self._source(node.args[0])!r})",
                    f"compare inside it, e.g. {f}(abs(qvel) <= 1.0)",
                )
            return ExprType("boolean", ())
        types = [self._number(a, f"an argument of {f}()") for a in node.args]
        if f == "norm":
            return ExprType("number", ())
        if f in ("abs", "sqrt"):
            return types[0]
        # min / max: one argument reduces, several broadcast elementwise.
        if len(types) == 1:
            return ExprType("number", ())
        return ExprType("number", self._broadcast(node, f"take {f} of", list(node.args), types))

    def visit_index(self, node: Index) -> ExprType:
        t = self.type_of(node.target)
        if t.is_scalar:
            raise self.error(
                node,
                f"cannot index {describe_type(t)} ({self._source(node.target)!r})",
                "only vectors have elements; drop the [...]",
            )
        n = t.shape[0]
        if not -n <= node.index < n:
            raise self.error(
                node,
                f"index {node.index} is out of range for {describe_type(t)} "
                f"({self._source(node.target)!r})",
                f"use an index in {-n}..{n - 1}",
            )
        return ExprType(t.kind, t.shape[1:])

"""The parsed form of a predicate: small frozen node classes and a visitor base for back-ends.

Every back-end (numpy evaluation, printing, SMT, explanation) is a ``Visitor``
subclass with one method per node type, so adding a back-end never touches the
parser. Nodes compare and hash structurally.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar, Generic, Iterator, TypeVar

__all__ = [
    "Node",
    "Num",
    "Name",
    "Vector",
    "Neg",
    "BinOp",
    "Power",
    "Compare",
    "BoolOp",
    "Not",
    "Call",
    "Index",
    "Visitor",
    "FunctionSpec",
    "FUNCTIONS",
    "ARITHMETIC_OPS",
    "COMPARE_OPS",
    "BOOL_OPS",
    "MAX_LITERAL",
    "MAX_VECTOR",
    "MAX_EXPONENT",
    "walk",
]

R = TypeVar("R")

ARITHMETIC_OPS = ("+", "-", "*", "/")
COMPARE_OPS = ("<", "<=", ">", ">=", "==", "!=")
BOOL_OPS = ("and", "or")
MAX_LITERAL = 1e9  # largest magnitude of a number literal
MAX_VECTOR = 64  # most items in a vector literal
MAX_EXPONENT = 4  # largest integer exponent of ``**``


@dataclass(frozen=True)
class FunctionSpec:
    """One entry of the fixed function table: arity and what it does to shapes."""

    name: str
    min_args: int
    max_args: int | None  # None: any number
    summary: str


FUNCTIONS: dict[str, FunctionSpec] = {
    spec.name: spec
    for spec in (
        FunctionSpec("norm", 1, 1, "Euclidean length of a vector (a scalar)"),
        FunctionSpec("abs", 1, 1, "elementwise absolute value"),
        FunctionSpec("sqrt", 1, 1, "elementwise square root (NaN below zero)"),
        FunctionSpec("min", 1, None, "min(v): smallest element; min(a, b, ...): elementwise"),
        FunctionSpec("max", 1, None, "max(v): largest element; max(a, b, ...): elementwise"),
        FunctionSpec("all", 1, 1, "true when every element of a comparison is true"),
        FunctionSpec("any", 1, 1, "true when some element of a comparison is true"),
    )
}


class Node:
    """Base of all nodes. Subclasses are frozen dataclasses."""

    visit_method: ClassVar[str] = ""

    def children(self) -> tuple["Node", ...]:
        """Direct sub-expressions, left to right."""
        return ()


@dataclass(frozen=True)
class Num(Node):
    """A number literal (negative literals are folded into ``value``)."""

    value: float
    visit_method: ClassVar[str] = "visit_num"

    def __post_init__(self) -> None:
        if isinstance(self.value, bool) or not isinstance(self.value, (int, float)):
            raise TypeError(f"Num.value must be a real number, got {self.value!r}")
        value = float(self.value)
        if not math.isfinite(value) or abs(value) > MAX_LITERAL:
            raise ValueError(
                f"number literal must be finite with magnitude <= 1e9, got {value!r}"
            )
        object.__setattr__(self, "value", value)


@dataclass(frozen=True)
class Name(Node):
    """A named state quantity or skill parameter."""

    id: str
    visit_method: ClassVar[str] = "visit_name"

    def __post_init__(self) -> None:
        if not isinstance(self.id, str) or not self.id.isidentifier():
            raise ValueError(f"Name.id must be an identifier, got {self.id!r}")


@dataclass(frozen=True)
class Vector(Node):
    """A vector literal ``[a, b, c]`` of scalar items."""

    items: tuple[Node, ...]
    visit_method: ClassVar[str] = "visit_vector"

    def __post_init__(self) -> None:
        object.__setattr__(self, "items", tuple(self.items))
        if not 1 <= len(self.items) <= MAX_VECTOR:
            raise ValueError(
                f"vector literal must have 1..{MAX_VECTOR} items, got {len(self.items)}"
            )
        _check_nodes("Vector.items", self.items)

    def children(self) -> tuple[Node, ...]:
        return self.items


@dataclass(frozen=True)
class Neg(Node):
    """Unary minus of a non-literal expression."""

    operand: Node
    visit_method: ClassVar[str] = "visit_neg"

    def __post_init__(self) -> None:
        _check_nodes("Neg.operand", (self.operand,))

    def children(self) -> tuple[Node, ...]:
        return (self.operand,)


@dataclass(frozen=True)
class BinOp(Node):
    """Elementwise ``+ - * /`` with scalar broadcasting."""

    op: str
    left: Node
    right: Node
    visit_method: ClassVar[str] = "visit_binop"

    def __post_init__(self) -> None:
        if self.op not in ARITHMETIC_OPS:
            raise ValueError(f"BinOp.op must be one of {ARITHMETIC_OPS}, got {self.op!r}")
        _check_nodes("BinOp operands", (self.left, self.right))

    def children(self) -> tuple[Node, ...]:
        return (self.left, self.right)


@dataclass(frozen=True)
class Power(Node):
    """``base ** exponent`` with a small non-negative integer exponent."""

    base: Node
    exponent: int
    visit_method: ClassVar[str] = "visit_power"

    def __post_init__(self) -> None:
        _check_nodes("Power.base", (self.base,))
        if (
            isinstance(self.exponent, bool)
            or not isinstance(self.exponent, int)
            or not 0 <= self.exponent <= MAX_EXPONENT
        ):
            raise ValueError(
                f"Power.exponent must be an integer in 0..{MAX_EXPONENT}, got {self.exponent!r}"
            )

    def children(self) -> tuple[Node, ...]:
        return (self.base,)


@dataclass(frozen=True)
class Compare(Node):
    """A comparison chain ``a < b <= c`` (each link elementwise, links and-ed)."""

    operands: tuple[Node, ...]
    ops: tuple[str, ...]
    visit_method: ClassVar[str] = "visit_compare"

    def __post_init__(self) -> None:
        object.__setattr__(self, "operands", tuple(self.operands))
        object.__setattr__(self, "ops", tuple(self.ops))
        if len(self.ops) < 1 or len(self.operands) != len(self.ops) + 1:
            raise ValueError(
                f"Compare needs n ops and n+1 operands, got {len(self.ops)} and {len(self.operands)}"
            )
        for op in self.ops:
            if op not in COMPARE_OPS:
                raise ValueError(f"Compare op must be one of {COMPARE_OPS}, got {op!r}")
        _check_nodes("Compare.operands", self.operands)

    def children(self) -> tuple[Node, ...]:
        return self.operands

    def links(self) -> Iterator[tuple[Node, str, Node]]:
        """The chain as (left, op, right) pairs."""
        for i, op in enumerate(self.ops):
            yield self.operands[i], op, self.operands[i + 1]


@dataclass(frozen=True)
class BoolOp(Node):
    """``and`` / ``or`` over two or more items; nested same-op items are flattened."""

    op: str
    items: tuple[Node, ...]
    visit_method: ClassVar[str] = "visit_boolop"

    def __post_init__(self) -> None:
        if self.op not in BOOL_OPS:
            raise ValueError(f"BoolOp.op must be one of {BOOL_OPS}, got {self.op!r}")
        _check_nodes("BoolOp.items", tuple(self.items))
        flat: list[Node] = []
        for item in self.items:
            if isinstance(item, BoolOp) and item.op == self.op:
                flat.extend(item.items)
            else:
                flat.append(item)
        if len(flat) < 2:
            raise ValueError(f"BoolOp needs at least 2 items, got {len(flat)}")
        object.__setattr__(self, "items", tuple(flat))

    def children(self) -> tuple[Node, ...]:
        return self.items


@dataclass(frozen=True)
class Not(Node):
    """Logical negation of a scalar boolean."""

    operand: Node
    visit_method: ClassVar[str] = "visit_not"

    def __post_init__(self) -> None:
        _check_nodes("Not.operand", (self.operand,))

    def children(self) -> tuple[Node, ...]:
        return (self.operand,)


@dataclass(frozen=True)
class Call(Node):
    """A call to one of ``FUNCTIONS`` with positional arguments."""

    func: str
    args: tuple[Node, ...]
    visit_method: ClassVar[str] = "visit_call"

    def __post_init__(self) -> None:
        object.__setattr__(self, "args", tuple(self.args))
        spec = FUNCTIONS.get(self.func)
        if spec is None:
            raise ValueError(f"Call.func must be one of {sorted(FUNCTIONS)}, got {self.func!r}")
        n = len(self.args)
        if n < spec.min_args or (spec.max_args is not None and n > spec.max_args):
            raise ValueError(f"{self.func}() takes {_arity(spec)}, got {n}")
        _check_nodes("Call.args", self.args)

    def children(self) -> tuple[Node, ...]:
        return self.args


@dataclass(frozen=True)
class Index(Node):
    """Element ``target[index]`` along the first axis (negative counts from the end)."""

    target: Node
    index: int
    visit_method: ClassVar[str] = "visit_index"

    def __post_init__(self) -> None:
        _check_nodes("Index.target", (self.target,))
        if isinstance(self.index, bool) or not isinstance(self.index, int):
            raise TypeError(f"Index.index must be an int, got {self.index!r}")

    def children(self) -> tuple[Node, ...]:
        return (self.target,)


def _arity(spec: FunctionSpec) -> str:
    if spec.max_args is None:
        return f"at least {spec.min_args} argument{'s' if spec.min_args != 1 else ''}"
    if spec.min_args == spec.max_args:
        return f"exactly {spec.min_args} argument{'s' if spec.min_args != 1 else ''}"
    return f"{spec.min_args} to {spec.max_args} arguments"


def _check_nodes(label: str, nodes: tuple[object, ...]) -> None:
    for node in nodes:
        if not isinstance(node, Node):
            raise TypeError(f"{label} must be predicate nodes, got {type(node).__name__}")


def walk(node: Node) -> Iterator[Node]:
    """Every node of the tree, parents before children."""
    stack = [node]
    while stack:
        current = stack.pop()
        yield current
        stack.extend(reversed(current.children()))


class Visitor(Generic[R]):
    """Base of a back-end: one ``visit_*`` method per node type, dispatched by type."""

    def visit(self, node: Node) -> R:
        method = getattr(self, node.visit_method, None)
        if method is None:
            raise TypeError(f"{type(self).__name__} cannot visit {type(node).__name__}")
        return method(node)

    def visit_num(self, node: Num) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_num")

    def visit_name(self, node: Name) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_name")

    def visit_vector(self, node: Vector) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_vector")

    def visit_neg(self, node: Neg) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_neg")

    def visit_binop(self, node: BinOp) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_binop")

    def visit_power(self, node: Power) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_power")

    def visit_compare(self, node: Compare) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_compare")

    def visit_boolop(self, node: BoolOp) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_boolop")

    def visit_not(self, node: Not) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_not")

    def visit_call(self, node: Call) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_call")

    def visit_index(self, node: Index) -> R:
        raise NotImplementedError(f"{type(self).__name__}.visit_index")

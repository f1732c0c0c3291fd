"""Canonical text of a predicate tree, with the fewest parentheses that parse back to it."""

from __future__ import annotations

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

__all__ = ["to_text", "format_number", "precedence"]

# Python's binding strengths, weakest first.
_OR, _AND, _NOT, _COMPARE, _SUM, _PRODUCT, _UNARY, _POWER, _ATOM = range(1, 10)


def format_number(value: float) -> str:
    """Shortest text that reads back as the same float; integers without '.0'."""
    if value == int(value) and abs(value) < 1e15:
        return str(int(value))
    return repr(float(value))


def precedence(node: Node) -> int:
    """Binding strength of the operator at the top of ``node``."""
    if isinstance(node, BoolOp):
        return _OR if node.op == "or" else _AND
    if isinstance(node, Not):
        return _NOT
    if isinstance(node, Compare):
        return _COMPARE
    if isinstance(node, BinOp):
        return _SUM if node.op in ("+", "-") else _PRODUCT
    if isinstance(node, Neg):
        return _UNARY
    if isinstance(node, Num):
        return _UNARY if format_number(node.value).startswith("-") else _ATOM
    if isinstance(node, Power):
        return _POWER
    return _ATOM


class _Printer(Visitor[str]):
    def wrap(self, node: Node, *, parens_below: int) -> str:
        text = self.visit(node)
        return f"({text})" if precedence(node) < parens_below else text

    def visit_num(self, node: Num) -> str:
        return format_number(node.value)

    def visit_name(self, node: Name) -> str:
        return node.id

    def visit_vector(self, node: Vector) -> str:
        return "[" + ", ".join(self.visit(x) for x in node.items) + "]"

    def visit_neg(self, node: Neg) -> str:
        return "-" + self.wrap(node.operand, parens_below=_UNARY)

    def visit_binop(self, node: BinOp) -> str:
        level = precedence(node)
        left = self.wrap(node.left, parens_below=level)
        right = self.wrap(node.right, parens_below=level + 1)  # left-associative
        return f"{left} {node.op} {right}"

    def visit_power(self, node: Power) -> str:
        return f"{self.wrap(node.base, parens_below=_ATOM)} ** {node.exponent}"

    def visit_compare(self, node: Compare) -> str:
        parts = [self.wrap(node.operands[0], parens_below=_COMPARE + 1)]
        for op, operand in zip(node.ops, node.operands[1:]):
            parts += [op, self.wrap(operand, parens_below=_COMPARE + 1)]
        return " ".join(parts)

    def visit_boolop(self, node: BoolOp) -> str:
        level = precedence(node)
        return f" {node.op} ".join(self.wrap(x, parens_below=level + 1) for x in node.items)

    def visit_not(self, node: Not) -> str:
        return "not " + self.wrap(node.operand, parens_below=_NOT)

    def visit_call(self, node: Call) -> str:
        return f"{node.func}(" + ", ".join(self.visit(x) for x in node.args) + ")"

    def visit_index(self, node: Index) -> str:
        return f"{self.wrap(node.target, parens_below=_ATOM)}[{node.index}]"


def to_text(node: Node) -> str:
    """Canonical text of ``node``: ``parse_predicate(to_text(n), ...)`` rebuilds ``n``."""
    return _Printer().visit(node)

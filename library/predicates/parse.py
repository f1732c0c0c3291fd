"""Whitelisted parse of predicate text into the node tree (Python's ast, parse only, never run)."""

from __future__ import annotations

import ast
from typing import Callable, Mapping

from kinetome.library.predicates.errors import PredicateError
from kinetome.library.predicates.nodes import (
    FUNCTIONS,
    MAX_EXPONENT,
    MAX_LITERAL,
    MAX_VECTOR,
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
from kinetome.library.predicates.predicate import Predicate
from kinetome.library.predicates.typecheck import Span, TypeChecker, check_shapes, suggest

__all__ = ["parse_predicate", "MAX_TEXT", "MAX_DEPTH"]

MAX_TEXT = 2000  # characters
MAX_DEPTH = 32  # nesting levels of the expression tree

_ARITHMETIC = {ast.Add: "+", ast.Sub: "-", ast.Mult: "*", ast.Div: "/"}
_COMPARE = {ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">=", ast.Eq: "==", ast.NotEq: "!="}
_REJECTED_BINOPS = {
    ast.FloorDiv: ("'//'", "use '/'"),
    ast.Mod: ("'%'", "predicates have no modulo; compare the quantity directly"),
    ast.MatMult: ("'@'", "use norm(...) or write the sum of products out"),
    ast.BitAnd: ("bitwise '&'", "use 'and'"),
    ast.BitOr: ("bitwise '|'", "use 'or'"),
    ast.BitXor: ("bitwise '^'", "use '**' for powers"),
    ast.LShift: ("'<<'", "use '*' or '/'"),
    ast.RShift: ("'>>'", "use '*' or '/'"),
}
_REJECTED_COMPARE = {ast.Is: "'is'", ast.IsNot: "'is not'", ast.In: "'in'", ast.NotIn: "'not in'"}
_NOUNS = {
    "Lambda": "a lambda",
    "IfExp": "a conditional expression (x if c else y)",
    "NamedExpr": "an assignment expression (:=)",
    "ListComp": "a list comprehension",
    "SetComp": "a set comprehension",
    "DictComp": "a dict comprehension",
    "GeneratorExp": "a generator expression",
    "Dict": "a dict",
    "Set": "a set",
    "Tuple": "a tuple",
    "Starred": "a starred expression",
    "JoinedStr": "an f-string",
    "FormattedValue": "an f-string",
    "Await": "await",
    "Yield": "yield",
    "YieldFrom": "yield from",
    "Slice": "a slice",
}
_FIXES = {
    "Tuple": "write a vector literal with square brackets, e.g. [0.3, 0.0, 0.45]",
    "IfExp": "combine comparisons with and/or instead",
    "ListComp": "use a vector comparison inside all(...) or any(...), e.g. all(abs(qvel) <= 1.0)",
    "GeneratorExp": "use a vector comparison inside all(...) or any(...), e.g. all(abs(qvel) <= 1.0)",
}


def _functions_hint() -> str:
    return "functions: " + ", ".join(sorted(FUNCTIONS))


class _Converter:
    """Turns an ``ast`` expression into nodes, recording where each node came from."""

    def __init__(self, body: str, *, lead: int, text: str, what: str):
        self.body = body
        self.lead = lead
        self.text = text
        self.what = what
        self.spans: dict[int, Span] = {}
        self._keep: list[Node] = []
        self._table: dict[type, Callable[[ast.AST, int], Node]] = {
            ast.Constant: self._constant,
            ast.Name: self._name,
            ast.List: self._list,
            ast.UnaryOp: self._unary,
            ast.BinOp: self._binop,
            ast.BoolOp: self._boolop,
            ast.Compare: self._compare,
            ast.Call: self._call,
            ast.Subscript: self._subscript,
            ast.Attribute: self._attribute,
        }

    # -- positions ----------------------------------------------------------------
    def position(self, node: ast.AST) -> tuple[int, int]:
        """1-based (line, column) in the original text, in characters."""
        byte_col = getattr(node, "col_offset", 0)  # the body is one line: newlines became spaces
        chars = len(self.body.encode("utf-8")[:byte_col].decode("utf-8", errors="ignore"))
        return _line_column(self.text, self.lead + chars)

    def source(self, node: ast.AST) -> str:
        return ast.get_source_segment(self.body, node) or ""

    def error(self, node: ast.AST, reason: str, fix: str = "") -> PredicateError:
        line, column = self.position(node)
        return PredicateError(reason, fix=fix, text=self.text, line=line, column=column, what=self.what)

    # -- conversion -----------------------------------------------------------------
    def convert(self, node: ast.AST, depth: int) -> Node:
        if depth > MAX_DEPTH:
            raise self.error(
                node,
                f"the expression nests deeper than {MAX_DEPTH} levels",
                "split it into simpler clauses joined by 'and'",
            )
        handler = self._table.get(type(node))
        if handler is None:
            kind = type(node).__name__
            noun = _NOUNS.get(kind, f"{kind} syntax")
            raise self.error(
                node,
                f"{noun} is not allowed in a predicate ({self.source(node)!r})",
                _FIXES.get(kind, "use numbers, names, arithmetic, comparisons, and/or/not and "
                           + _functions_hint()),
            )
        result = handler(node, depth)
        if id(result) not in self.spans:
            line, column = self.position(node)
            self.spans[id(result)] = Span(line, column, self.source(node))
            self._keep.append(result)
        return result

    def _constant(self, node: ast.Constant, depth: int) -> Node:
        value = node.value
        if isinstance(value, bool):
            raise self.error(
                node,
                f"the literal {value!r} is not allowed",
                "write a comparison such as 'torso_height > 0.8'",
            )
        if isinstance(value, (int, float)):
            if not abs(value) <= MAX_LITERAL:
                raise self.error(
                    node,
                    f"number literal {self.source(node)} is too large: magnitude must be <= 1e9",
                    "rescale the quantity or use a smaller bound",
                )
            return Num(float(value))
        if isinstance(value, str):
            raise self.error(
                node,
                f"string literal {value!r} is not allowed",
                "predicates compare numbers; refer to quantities by name without quotes",
            )
        if isinstance(value, complex):
            raise self.error(node, f"complex number {self.source(node)} is not allowed", "use real numbers")
        raise self.error(
            node,
            f"the literal {self.source(node)} is not allowed",
            "use numbers, names and vector literals",
        )

    def _name(self, node: ast.Name, depth: int) -> Node:
        return Name(node.id)

    def _list(self, node: ast.List, depth: int) -> Node:
        if not node.elts:
            raise self.error(node, "an empty vector literal is not allowed", "list at least one number")
        if len(node.elts) > MAX_VECTOR:
            raise self.error(
                node,
                f"vector literal has {len(node.elts)} items, more than {MAX_VECTOR}",
                "compare fewer components, or name the quantity in the state layout",
            )
        return Vector(tuple(self.convert(x, depth + 1) for x in node.elts))

    def _unary(self, node: ast.UnaryOp, depth: int) -> Node:
        if isinstance(node.op, ast.Invert):
            raise self.error(node, "bitwise '~' is not allowed", "use 'not'")
        operand = self.convert(node.operand, depth + 1)
        if isinstance(node.op, ast.Not):
            return Not(operand)
        if isinstance(node.op, ast.UAdd):
            return operand
        if isinstance(operand, Num):
            return Num(-operand.value)
        return Neg(operand)

    def _binop(self, node: ast.BinOp, depth: int) -> Node:
        op_type = type(node.op)
        if op_type in _REJECTED_BINOPS:
            label, fix = _REJECTED_BINOPS[op_type]
            raise self.error(node, f"operator {label} is not allowed ({self.source(node)!r})",
                             f"{fix}; allowed: + - * / and ** with an integer 0..{MAX_EXPONENT}")
        if op_type is ast.Pow:
            exponent = node.right
            value = exponent.value if isinstance(exponent, ast.Constant) else None
            if isinstance(value, bool) or not isinstance(value, int):
                raise self.error(
                    exponent,
                    f"the exponent of '**' must be an integer literal in 0..{MAX_EXPONENT}, "
                    f"got {self.source(exponent)!r}",
                    "write x ** 2 for a square, sqrt(x) for a root, 1 / x for an inverse",
                )
            if value > MAX_EXPONENT:
                raise self.error(
                    exponent,
                    f"the exponent of '**' must be an integer literal in 0..{MAX_EXPONENT}, got {value}",
                    "multiply out larger powers, e.g. (x ** 2) ** 3",
                )
            return Power(self.convert(node.left, depth + 1), value)
        return BinOp(
            _ARITHMETIC[op_type],
            self.convert(node.left, depth + 1),
            self.convert(node.right, depth + 1),
        )

    def _boolop(self, node: ast.BoolOp, depth: int) -> Node:
        op = "and" if isinstance(node.op, ast.And) else "or"
        return BoolOp(op, tuple(self.convert(x, depth + 1) for x in node.values))

    def _compare(self, node: ast.Compare, depth: int) -> Node:
        ops = []
        for op in node.ops:
            if type(op) in _REJECTED_COMPARE:
                raise self.error(
                    node,
                    f"operator {_REJECTED_COMPARE[type(op)]} is not allowed ({self.source(node)!r})",
                    "compare numbers with < <= > >= == !=",
                )
            ops.append(_COMPARE[type(op)])
        operands = [node.left, *node.comparators]
        return Compare(tuple(self.convert(x, depth + 1) for x in operands), tuple(ops))

    def _call(self, node: ast.Call, depth: int) -> Node:
        func = node.func
        if isinstance(func, ast.Attribute):
            return self._attribute(func, depth)
        if not isinstance(func, ast.Name):
            raise self.error(
                func,
                f"only named functions can be called, got {self.source(func)!r}",
                _functions_hint(),
            )
        spec = FUNCTIONS.get(func.id)
        if spec is None:
            known = sorted(FUNCTIONS)
            raise self.error(
                func,
                f"unknown function {func.id!r}",
                f"{suggest(func.id, known)}{_functions_hint()}",
            )
        if node.keywords:
            keyword = node.keywords[0]
            label = f"{keyword.arg}=" if keyword.arg else "**"
            raise self.error(
                keyword,
                f"keyword argument {label!r} is not allowed in {func.id}()",
                "pass arguments by position",
            )
        for arg in node.args:
            if isinstance(arg, ast.Starred):
                raise self.error(
                    arg,
                    f"starred argument {self.source(arg)!r} is not allowed in {func.id}()",
                    f"pass the vector itself, e.g. {func.id}({self.source(arg.value)})",
                )
        n = len(node.args)
        if n < spec.min_args or (spec.max_args is not None and n > spec.max_args):
            if spec.max_args is None:
                takes = f"at least {spec.min_args} argument"
            elif spec.min_args == spec.max_args:
                takes = f"exactly {spec.min_args} argument{'s' if spec.min_args != 1 else ''}"
            else:
                takes = f"{spec.min_args} to {spec.max_args} arguments"
            raise self.error(node, f"{func.id}() takes {takes}, got {n}", f"{func.id}: {spec.summary}")
        return Call(func.id, tuple(self.convert(x, depth + 1) for x in node.args))

    def _subscript(self, node: ast.Subscript, depth: int) -> Node:
        index = node.slice
        if isinstance(index, ast.Slice):
            raise self.error(
                index,
                f"slice {self.source(node)!r} is not allowed",
                "index one element with an integer, e.g. qpos[0]",
            )
        if isinstance(index, ast.Tuple):
            raise self.error(
                index,
                f"multi-axis index {self.source(node)!r} is not allowed",
                "index one axis at a time, e.g. x[0][1]",
            )
        value = _int_literal(index)
        if value is None:
            raise self.error(
                index,
                f"an index must be an integer literal, got {self.source(index)!r}",
                "write the element number, e.g. qpos[0] or qpos[-1]",
            )
        return Index(self.convert(node.value, depth + 1), value)

    def _attribute(self, node: ast.Attribute, depth: int) -> Node:
        raise self.error(
            node,
            f"attribute access {self.source(node)!r} is not allowed",
            f"use the predicate functions instead ({_functions_hint()})",
        )


def _int_literal(node: ast.AST) -> int | None:
    """The value of ``3`` or ``-3`` as written, else None."""
    sign = 1
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, ast.USub):
        sign, node = -1, node.operand
    if isinstance(node, ast.Constant) and isinstance(node.value, int) and not isinstance(node.value, bool):
        return sign * node.value
    return None


def _line_column(text: str, offset: int) -> tuple[int, int]:
    """1-based (line, column) of a 0-based character offset into ``text``."""
    line = text.count("\n", 0, offset) + 1
    column = offset - (text.rfind("\n", 0, offset) + 1) + 1
    return line, column


def _syntax_error(exc: SyntaxError, *, text: str, body: str, lead: int, what: str) -> PredicateError:
    # Python gives offset 0 when the text ends too early: point just past the end.
    offset = (exc.offset - 1) if exc.offset else len(body.rstrip())
    line, column = _line_column(text, lead + min(offset, len(body)))
    detail = "" if exc.msg == "invalid syntax" else f": {exc.msg}"
    return PredicateError(
        f"invalid syntax{detail}",
        fix="write one Python-style expression, e.g. 'norm(fingertip - target) < 0.02 and torso_height > 0.8'",
        text=text,
        line=line,
        column=column,
        what=what,
    )


def parse_predicate(
    text: str, names: Mapping[str, tuple[int, ...]], *, what: str = "predicate"
) -> Predicate:
    """Parse ``text`` over ``names`` (name -> shape, ``()`` for a scalar) into a ``Predicate``.

    Only the whitelisted grammar is accepted; the text is parsed with
    ``ast.parse`` and never compiled or run. Raises ``PredicateError`` with the
    column of the first problem and how to fix it. ``what`` names the field in
    messages (e.g. ``"stops_when"``).
    """
    shapes = check_shapes(names)
    if not isinstance(text, str):
        raise PredicateError(f"must be text, got {type(text).__name__}", fix="write the predicate as a string", what=what)
    if len(text) > MAX_TEXT:
        raise PredicateError(
            f"is {len(text)} characters long, more than {MAX_TEXT}",
            fix="split it into simpler clauses or shorten it",
            text=text,
            what=what,
        )
    if "#" in text:
        # Comments are refused: with newlines read as spaces, one would silently swallow the rest.
        line, column = _line_column(text, text.index("#"))
        raise PredicateError(
            "comments ('#') are not allowed in a predicate",
            fix="remove the comment; describe the skill in its description field instead",
            text=text,
            line=line,
            column=column,
            what=what,
        )
    # Newlines are plain whitespace in a predicate (YAML block scalars keep them);
    # replacing them one for one keeps every character offset.
    flat = text.replace("\r", " ").replace("\n", " ")
    body = flat.lstrip()
    if not body.strip():
        raise PredicateError("is empty", fix="write a condition such as 'torso_height > 0.8'", text=text, what=what)
    lead = len(flat) - len(body)
    try:
        tree = ast.parse(body, mode="eval")
    except SyntaxError as exc:
        raise _syntax_error(exc, text=text, body=body, lead=lead, what=what) from None
    except (RecursionError, MemoryError):
        raise PredicateError(
            f"nests deeper than {MAX_DEPTH} levels", fix="split it into simpler clauses", text=text, what=what
        ) from None
    converter = _Converter(body, lead=lead, text=text, what=what)
    root = converter.convert(tree.body, 1)
    TypeChecker(shapes, spans=converter.spans, text=text, what=what).check_predicate(root)
    return Predicate(root, shapes)

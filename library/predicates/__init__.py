"""Predicate language for starts_when / stops_when: whitelisted parse, numpy, SMT and text back-ends.

The SMT names (``SmtContext``, ``to_z3``, ``check_implication``,
``ImplicationResult``) load ``kinetome.library.predicates.smt`` and with it z3
on first access, so importing this package never imports z3.
"""

from __future__ import annotations

from typing import Any

from kinetome.library.predicates.errors import PredicateError
from kinetome.library.predicates.explain import Violation, explain
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
    Visitor,
    walk,
)
from kinetome.library.predicates.numpy_eval import evaluate_node, prepare_values
from kinetome.library.predicates.parse import MAX_DEPTH, MAX_TEXT, parse_predicate
from kinetome.library.predicates.predicate import Predicate
from kinetome.library.predicates.printer import to_text
from kinetome.library.predicates.typecheck import ExprType, TypeChecker

__all__ = [
    "parse_predicate",
    "Predicate",
    "PredicateError",
    "explain",
    "Violation",
    "evaluate_node",
    "prepare_values",
    "to_text",
    "ExprType",
    "TypeChecker",
    "Visitor",
    "walk",
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
    "FUNCTIONS",
    "MAX_TEXT",
    "MAX_DEPTH",
    "MAX_LITERAL",
    "MAX_VECTOR",
    "MAX_EXPONENT",
    "SmtContext",
    "to_z3",
    "check_implication",
    "ImplicationResult",
]

_SMT_NAMES = frozenset({"SmtContext", "to_z3", "check_implication", "ImplicationResult"})


def __getattr__(name: str) -> Any:
    if name in _SMT_NAMES:
        from kinetome.library.predicates import smt

        return getattr(smt, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

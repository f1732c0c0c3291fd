"""Predicate: a type-checked boolean tree over named quantities, with evaluation and printing."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

import numpy as np

from kinetome.library.predicates.nodes import BoolOp, Name, Node, walk
from kinetome.library.predicates.numpy_eval import evaluate_node, prepare_values
from kinetome.library.predicates.printer import to_text
from kinetome.library.predicates.typecheck import TypeChecker, check_shapes

__all__ = ["Predicate"]

Shapes = tuple[tuple[str, tuple[int, ...]], ...]


def _used_names(root: Node) -> frozenset[str]:
    return frozenset(n.id for n in walk(root) if isinstance(n, Name))


@dataclass(frozen=True, eq=True)
class Predicate:
    """A boolean expression over named quantities (state and skill parameters).

    ``root`` is the node tree; ``shapes`` holds the shape of each name the tree
    uses (a mapping may be given; it is narrowed to the used names and stored as
    a sorted tuple, so two predicates with the same tree are equal whatever
    extra names their tables had). The tree is type-checked on construction.
    """

    root: Node
    shapes: Shapes

    def __post_init__(self) -> None:
        if not isinstance(self.root, Node):
            raise TypeError(f"Predicate.root must be a predicate node, got {type(self.root).__name__}")
        table = dict(self.shapes) if not isinstance(self.shapes, Mapping) else self.shapes
        table = check_shapes(table)
        used = _used_names(self.root)
        narrowed = tuple(sorted((name, table[name]) for name in used if name in table))
        object.__setattr__(self, "shapes", narrowed)
        # Raises PredicateError for unknown names or misuse of shapes and kinds.
        TypeChecker(table, text="").check_predicate(self.root)

    # -- structure ------------------------------------------------------------------
    @property
    def names(self) -> frozenset[str]:
        """Names of the quantities and parameters the predicate reads."""
        return frozenset(name for name, _ in self.shapes)

    def shape_of(self, name: str) -> tuple[int, ...]:
        """Shape of a name the predicate uses."""
        for key, shape in self.shapes:
            if key == name:
                return shape
        raise KeyError(f"predicate does not use {name!r}; it uses {sorted(self.names)}")

    def clauses(self) -> tuple["Predicate", ...]:
        """The top-level ``and`` conjuncts, each as a Predicate (itself if there is one)."""
        if isinstance(self.root, BoolOp) and self.root.op == "and":
            table = dict(self.shapes)
            return tuple(Predicate(item, table) for item in self.root.items)
        return (self,)

    @staticmethod
    def conjunction(predicates: "list[Predicate] | tuple[Predicate, ...]") -> "Predicate":
        """All of ``predicates`` joined with ``and`` (one predicate is returned as is)."""
        preds = list(predicates)
        if not preds:
            raise ValueError("conjunction needs at least one predicate, got none")
        if len(preds) == 1:
            return preds[0]
        table: dict[str, tuple[int, ...]] = {}
        for p in preds:
            for name, shape in p.shapes:
                if table.setdefault(name, shape) != shape:
                    raise ValueError(
                        f"predicates disagree on the shape of {name!r}: {table[name]} and {shape}"
                    )
        return Predicate(BoolOp("and", tuple(p.root for p in preds)), table)

    # -- back-ends ------------------------------------------------------------------
    def evaluate(self, values: Mapping[str, np.ndarray], *, batch: int | None = None) -> np.ndarray:
        """(B,) bool: the predicate on every row of a batch.

        ``values`` maps each used name to an array of shape (B, *shape), or
        (*shape) for a value shared by all rows (a skill parameter); other
        names are ignored. B comes from the batched values; give ``batch`` when
        none of the used names is batched (e.g. a predicate over parameters
        only) to get B rows anyway.
        """
        arrays, rows = prepare_values(values, dict(self.shapes), batch=batch)
        result = evaluate_node(self.root, arrays)
        return np.broadcast_to(result, (rows,)).astype(bool, copy=True)

    @property
    def text(self) -> str:
        """Canonical text (same as ``str``)."""
        return to_text(self.root)

    def __str__(self) -> str:
        return to_text(self.root)

    def __repr__(self) -> str:
        return f"Predicate({to_text(self.root)!r})"

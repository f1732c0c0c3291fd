"""Pair facts from z3: does A's stop region imply B's initiation set (or the goal), or can they never meet?

Two questions per pair, each one solver call (z3 imported lazily):

- containment: stop region of A and the premises imply the target predicate
  (UNSAT of stop and premises and not target) -> ``proved``;
- disjointness: stop region of A and the premises imply *not* target -> ``impossible``
  (A can never hand over there).

Derived quantities may be relaxed to free variables inside their envelope by the
caller's bounds: both answers stay sound (they hold for a superset of the real
states). Anything else, including a solver timeout, is ``open``: the search
measures it on particles.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

from .search import IMPOSSIBLE, OPEN, PROVED, LinkFact

__all__ = ["negation", "region_fact", "FactCache"]


def negation(pred: Any) -> Any:
    """``not pred`` as a Predicate."""
    from ..predicates import Not, Predicate

    return Predicate(Not(pred.root), dict(pred.shapes))


def region_fact(
    stop: Any,
    target: Any,
    *,
    premises: Sequence[Any] = (),
    declare: Mapping[str, tuple[int, ...]],
    constants: Mapping[str, Any] | None = None,
    bounds: Mapping[str, Any] | None = None,
    timeout_ms: int = 5_000,
    source: str = "A",
    target_name: str = "B starts_when",
    containment: bool = True,
) -> LinkFact:
    """``proved`` / ``impossible`` / ``open`` for stop region ``stop`` against predicate ``target``
    (``containment=False`` asks only whether they can meet: one solver call)."""
    from ..predicates.smt import SmtContext, check_implication

    def ask(conclusion: Any) -> Any:
        ctx = SmtContext(dict(declare), constants=dict(constants or {}))
        return check_implication([stop, *premises], conclusion, ctx, bounds=dict(bounds or {}), timeout_ms=timeout_ms)

    inside = ask(target) if containment else None
    if inside is not None and inside.status == "proved":
        return LinkFact(PROVED, f"z3: every state {source} may stop in satisfies {target_name}")
    outside = ask(negation(target))
    if outside.status == "proved":
        return LinkFact(IMPOSSIBLE, f"z3: no state {source} may stop in satisfies {target_name} (the regions do not meet)")
    if "unknown" in (getattr(inside, "status", ""), outside.status):
        return LinkFact(OPEN, f"z3 could not decide within {timeout_ms} ms; measured")
    return LinkFact(OPEN, f"some states {source} may stop in satisfy {target_name}, some do not; measured")


@dataclass
class FactCache:
    """Pair facts computed once per (A, B) pair (B None: the goal), with a count of solver questions."""

    compute: Callable[[str, str | None], LinkFact]
    facts: dict[tuple[str, str | None], LinkFact] = field(default_factory=dict)

    def __call__(self, a: str, b: str | None = None) -> LinkFact:
        key = (a, b)
        if key not in self.facts:
            self.facts[key] = self.compute(a, b)
        return self.facts[key]

"""Pair facts from z3: does A's stop region imply B's initiation set (or the goal), or can they never meet?

Cheap sound reasoning over balls and boxes (``region_bounds``) answers first; z3 is
asked only when it leaves the pair undecided (``solver_fact`` alone, for a caller that
asked the bounds itself), and its answer is kept in a ``SolverMemo`` keyed by
everything the question contains (both predicates, constants, premises, bounds,
declared shapes, timeout), so pairs that ask the same question (skills sharing a stop
region or an initiation set) ask it once. Two questions per pair, each one solver call (z3 imported lazily):

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

import numpy as np

from .search import IMPOSSIBLE, OPEN, PROVED, LinkFact

__all__ = ["negation", "region_fact", "solver_fact", "bounds_fact", "FactCache", "SolverMemo", "question_key"]


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
    memo: "SolverMemo | None" = None,
) -> LinkFact:
    """``proved`` / ``impossible`` / ``open`` for stop region ``stop`` against predicate ``target``: region
    bounds first, then ``solver_fact`` (``containment=False`` asks z3 only whether they can meet: one call)."""
    from .region_bounds import atoms_of

    quick = bounds_fact(atoms_of(stop, constants), atoms_of(target, constants), source, target_name)
    if quick.status != OPEN:  # a proof is free, so handoffs get containment too
        return quick
    return solver_fact(stop, target, premises=premises, declare=declare, constants=constants, bounds=bounds,
                       timeout_ms=timeout_ms, source=source, target_name=target_name, containment=containment, memo=memo)


def solver_fact(
    stop: Any,
    target: Any,
    *,
    premises: Sequence[Any],
    declare: Mapping[str, tuple[int, ...]],
    constants: Mapping[str, Any] | None,
    bounds: Mapping[str, Any] | None,
    timeout_ms: int,
    source: str,
    target_name: str,
    containment: bool = True,
    memo: "SolverMemo | None" = None,
) -> LinkFact:
    """z3's fact for a pair region bounds left open (for callers that asked the bounds themselves); the
    answer is kept in ``memo`` and reused for the very same question."""
    key = question_key(stop, target, premises, declare, constants, bounds, timeout_ms, containment)
    if memo is not None and key in memo.answers:
        memo.reused += 1
        return _fact(memo.answers[key], source, target_name, timeout_ms)
    answer = _solve(stop, target, premises=premises, declare=declare, constants=constants, bounds=bounds,
                    timeout_ms=timeout_ms, containment=containment)
    if memo is not None:
        memo.answers[key] = answer
        memo.asked += 1
    return _fact(answer, source, target_name, timeout_ms)


def bounds_fact(stop: Any, target: Any, source: str, target_name: str) -> LinkFact:
    """The fact region bounds alone give for ``stop`` / ``target`` (``region_bounds.Atoms``); undecided is open."""
    from .region_bounds import region_verdict

    verdict = region_verdict(stop, target)
    if verdict == PROVED:
        return LinkFact(PROVED, f"region bounds: every state {source} may stop in satisfies {target_name}")
    if verdict == IMPOSSIBLE:
        return LinkFact(IMPOSSIBLE, f"region bounds: no state {source} may stop in satisfies {target_name} (the regions do not meet)")
    return LinkFact(OPEN, f"not decided by region bounds ({source} stop region against {target_name}); measured")


def _fact(answer: str, source: str, target_name: str, timeout_ms: int) -> LinkFact:
    if answer == PROVED:
        return LinkFact(PROVED, f"z3: every state {source} may stop in satisfies {target_name}")
    if answer == IMPOSSIBLE:
        return LinkFact(IMPOSSIBLE, f"z3: no state {source} may stop in satisfies {target_name} (the regions do not meet)")
    if answer == "unknown":
        return LinkFact(OPEN, f"z3 could not decide within {timeout_ms} ms; measured")
    return LinkFact(OPEN, f"some states {source} may stop in satisfy {target_name}, some do not; measured")


def _solve(stop: Any, target: Any, *, premises, declare, constants, bounds, timeout_ms: int, containment: bool) -> str:
    """z3's answer: ``proved``, ``impossible``, ``unknown`` or ``both`` (some states do, some do not)."""
    from ..predicates.smt import SmtContext, check_implication

    def ask(conclusion: Any) -> Any:
        ctx = SmtContext(dict(declare), constants=dict(constants or {}))
        return check_implication([stop, *premises], conclusion, ctx, bounds=dict(bounds or {}), timeout_ms=timeout_ms)

    inside = ask(target) if containment else None
    if inside is not None and inside.status == "proved":
        return PROVED
    outside = ask(negation(target))
    if outside.status == "proved":
        return IMPOSSIBLE
    if "unknown" in (getattr(inside, "status", ""), outside.status):
        return "unknown"
    return "both"


def _array_key(value: Any) -> tuple:
    a = np.asarray(value, dtype=np.float64)
    return (a.shape, a.tobytes())


def question_key(stop: Any, target: Any, premises: Sequence[Any], declare: Mapping[str, Any], constants: Mapping[str, Any] | None,
                 bounds: Mapping[str, Any] | None, timeout_ms: int, containment: bool) -> tuple:
    """Everything a solver answer depends on: predicates (structural), premises, shapes, constant and bound values."""
    return (
        stop, target, tuple(premises), tuple(sorted((k, tuple(v)) for k, v in declare.items())),
        tuple(sorted((k, _array_key(v)) for k, v in (constants or {}).items())),
        tuple(sorted((k, _array_key(lo), _array_key(hi)) for k, (lo, hi) in (bounds or {}).items())),
        int(timeout_ms), bool(containment),
    )


@dataclass
class SolverMemo:
    """z3 answers of one run keyed by ``question_key``; counts of questions asked and answers reused."""

    answers: dict[tuple, str] = field(default_factory=dict)
    asked: int = 0
    reused: int = 0


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

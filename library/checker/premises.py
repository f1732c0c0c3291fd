"""Which premises a containment proof used (z3's unsat core), and whether simulation confirms them.

After a proof, the query is asked again with each premise of the envelope tracked
by its own literal; z3's unsat core, shrunk by deletion until every premise left is
needed, names what the proof rests on. Enforced premises hold in every simulated
state by construction; a declared or assumed one counts only when this chain's
simulated episodes confirm it in the states the proof is about (A's stop states),
with the worst value seen printed beside it. If the simulation exceeds it, the
proof is void.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from .envelope import ENFORCED, Premise

__all__ = ["premises_used", "PremiseCheck", "check_premises"]


def _tracked_solver(stop: Any, conclusion: Any, items: Sequence[Premise], *, declare: dict, constants: dict, timeout_ms: int):
    import z3

    from ..predicates.smt import SmtContext, to_z3

    ctx = SmtContext(declare, constants=constants)
    solver = z3.Solver()
    solver.set("timeout", timeout_ms)
    solver.add(to_z3(stop, ctx), z3.Not(to_z3(conclusion, ctx)))
    literals = {}
    terms = [(i, [to_z3(p.predicate, ctx)] if p.predicate is not None else []) for i, p in enumerate(items)]
    for i, preds in terms:
        cons = preds + ctx.bound_constraints(items[i].bounds)
        if cons:
            literals[i] = z3.Bool(f"premise_{i}")
            solver.add(z3.Implies(literals[i], z3.And(cons)))  # holds when assumed (check with assumptions)
    solver.add(*ctx.side_constraints)
    return solver, literals


def premises_used(
    stop: Any, conclusion: Any, items: Sequence[Premise], *, declare: dict, constants: dict, timeout_ms: int
) -> list[Premise] | None:
    """The premises a proof of ``stop and premises => conclusion`` needs (a minimal core); None if z3 does not say unsat."""
    import z3

    solver, literals = _tracked_solver(stop, conclusion, items, declare=declare, constants=constants, timeout_ms=timeout_ms)
    if solver.check(*literals.values()) != z3.unsat:
        return None
    by_name = {str(lit): i for i, lit in literals.items()}
    core = [by_name[str(c)] for c in solver.unsat_core() if str(c) in by_name]
    for i in list(core):  # deletion: drop a premise if the rest still prove it
        rest = [literals[k] for k in core if k != i]
        if solver.check(*rest) == z3.unsat:
            core.remove(i)
    return [items[i] for i in sorted(core)]


@dataclass(frozen=True)
class PremiseCheck:
    """A premise the proof used, and what the simulation showed about it."""

    label: str
    kind: str
    status: str  # enforced | confirmed | exceeded | unchecked
    worst: str = ""  # the most extreme value seen, as text
    states: int = 0  # simulated stop states it was checked on

    def to_dict(self) -> dict[str, Any]:
        return {"label": self.label, "kind": self.kind, "status": self.status, "worst": self.worst, "states": self.states}

    def text(self) -> str:
        if self.status == "enforced":
            return f"{self.label} [enforced by the simulator]"
        if self.status == "unchecked":
            return f"{self.label} [{self.kind}; not checked: no simulation]"
        verb = "exceeded" if self.status == "exceeded" else "confirmed"
        return f"{self.label} [{self.kind}; {verb} in {self.states} simulated stop states, worst {self.worst}]"


def check_premises(used: Sequence[Premise], stop_states: Mapping[str, np.ndarray] | None) -> list[PremiseCheck]:
    """Each used premise against A's simulated stop states (None: no simulation ran)."""
    out = []
    for p in used:
        if p.kind == ENFORCED:
            out.append(PremiseCheck(p.label, p.kind, "enforced"))
            continue
        n = 0 if stop_states is None or not stop_states else len(next(iter(stop_states.values())))
        if stop_states is None or n == 0:
            out.append(PremiseCheck(p.label, p.kind, "unchecked"))
            continue
        held = p.holds(stop_states)
        worst = p.worst(stop_states)
        out.append(PremiseCheck(p.label, p.kind, "confirmed" if bool(np.all(held)) else "exceeded", "" if worst is None else worst[1], n))
    return out
